//! Reading samples record by record for a requested range, so memory
//! follows the range, not the file.

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use super::*;
use crate::error::{LacunaError, Result};
use crate::ingest::{Event, SignalSource};

/// An open EDF/BDF file: header plus random access to record ranges.
pub struct EdfFile {
    path: PathBuf,
    file: File,
    pub header: EdfHeader,
    /// Indices (into header.signals) of the channels offered as the recording:
    /// the non-annotation signals sharing the dominant sampling rate.
    channels: Vec<usize>,
    names: Vec<String>,
    /// Signals set aside because their rate differs, with their rate.
    pub set_aside: Vec<(String, f64)>,
    samples_per_record: usize,
    record_buf: Vec<u8>,
}

impl EdfFile {
    /// Opens and checks a file. Nothing data-sized is allocated here.
    pub fn open(path: &Path) -> Result<EdfFile> {
        let read_err = |source| LacunaError::Read {
            path: path.to_path_buf(),
            source,
        };
        crate::trials::io::require_regular(path)?;
        let mut file = File::open(path).map_err(read_err)?;
        let file_len = file.metadata().map_err(read_err)?.len();
        let mut fixed = vec![0u8; 256.min(file_len as usize)];
        file.read_exact(&mut fixed).map_err(read_err)?;
        // Read the signal headers only once the fixed part says how long they are.
        let mut bytes = fixed;
        if bytes.len() == 256 {
            let ns = std::str::from_utf8(&bytes[252..256])
                .ok()
                .and_then(|t| t.trim().parse::<u64>().ok())
                .unwrap_or(0);
            let want = (256 * ns).min(file_len.saturating_sub(256));
            let mut rest = vec![0u8; want as usize];
            file.read_exact(&mut rest).map_err(read_err)?;
            bytes.extend_from_slice(&rest);
        }
        let header = EdfHeader::parse(&bytes, file_len, path)?;
        Self::from_header(path, file, header)
    }

    /// Physical units of the offered channels (the header's dimension field).
    pub fn units(&self) -> Vec<String> {
        self.channels
            .iter()
            .map(|&k| self.header.signals[k].unit.trim().to_string())
            .collect()
    }

    fn from_header(path: &Path, file: File, header: EdfHeader) -> Result<EdfFile> {
        // Dominant rate: the samples-per-record value shared by most signals.
        let data: Vec<usize> = (0..header.signals.len())
            .filter(|&k| !header.signals[k].is_annotation())
            .collect();
        if data.is_empty() {
            return Err(LacunaError::Format {
                path: path.to_path_buf(),
                message: "the file holds only annotations, no signals".into(),
            });
        }
        let mut counts: Vec<(usize, usize)> = Vec::new();
        for &k in &data {
            let spr = header.signals[k].samples_per_record;
            match counts.iter_mut().find(|(s, _)| *s == spr) {
                Some(c) => c.1 += 1,
                None => counts.push((spr, 1)),
            }
        }
        // Most signals first; among equals, the higher rate.
        counts.sort_by(|a, b| b.1.cmp(&a.1).then(b.0.cmp(&a.0)));
        let spr = counts[0].0;
        let channels: Vec<usize> = data
            .iter()
            .copied()
            .filter(|&k| header.signals[k].samples_per_record == spr)
            .collect();
        let set_aside = data
            .iter()
            .filter(|&&k| header.signals[k].samples_per_record != spr)
            .map(|&k| {
                let s = &header.signals[k];
                (
                    s.label.clone(),
                    s.samples_per_record as f64 / header.record_seconds,
                )
            })
            .collect();
        let names = channels
            .iter()
            .map(|&k| header.signals[k].label.clone())
            .collect();
        let record_buf = vec![0u8; header.record_bytes()];
        Ok(EdfFile {
            path: path.to_path_buf(),
            file,
            header,
            channels,
            names,
            set_aside,
            samples_per_record: spr,
            record_buf,
        })
    }

    fn read_record(&mut self, r: usize) -> Result<()> {
        let offset = self.header.header_bytes as u64 + r as u64 * self.record_buf.len() as u64;
        let path = self.path.clone();
        let read_err = |source| LacunaError::Read { path, source };
        self.file
            .seek(SeekFrom::Start(offset))
            .and_then(|_| self.file.read_exact(&mut self.record_buf))
            .map_err(read_err)
    }

    /// Decodes signal `k` of the record in the buffer into `out` (physical units).
    fn decode(&self, k: usize, from: usize, to: usize, out: &mut Vec<f64>) {
        let s = &self.header.signals[k];
        let (gain, offset) = s.gain_offset();
        let base = self.header.signal_offset(k);
        let bps = self.header.variant.sample_bytes();
        let bytes = &self.record_buf[base + from * bps..base + to * bps];
        if bps == 2 {
            out.extend(
                bytes
                    .chunks_exact(2)
                    .map(|b| i16::from_le_bytes([b[0], b[1]]) as f64 * gain + offset),
            );
        } else {
            out.extend(bytes.chunks_exact(3).map(|b| {
                let v = (i32::from_le_bytes([0, b[0], b[1], b[2]])) >> 8;
                v as f64 * gain + offset
            }));
        }
    }

    /// Reads and checks the annotation signal of every data record (EDF+/BDF+
    /// files; `None` for plain EDF/BDF). Refuses malformed TALs naming the
    /// record and byte offset. Event onsets are returned relative to the
    /// first sample of the data (the first record's time-keeping onset is
    /// subtracted), so a recording whose first record starts at +0.3945 s
    /// cuts its epochs where the annotations say.
    pub fn scan_annotations(&mut self) -> Result<Option<AnnotationScan>> {
        let Some(k) = self.header.signals.iter().position(|s| s.is_annotation()) else {
            return Ok(None);
        };
        let base = self.header.signal_offset(k);
        let len = self.header.signals[k].samples_per_record * self.header.variant.sample_bytes();
        // Only the annotation signal's bytes of each record are read.
        let mut bytes = vec![0u8; len];
        let mut events = Vec::new();
        let mut first_record_onset = None;
        let fail = |r: usize, message: String| LacunaError::Format {
            path: self.path.clone(),
            message: format!(
                "data record {r}, annotation signal: {message}; fix the file or pass --skip-annotations to ignore the annotation signal"
            ),
        };
        for r in 0..self.header.n_records {
            let offset = self.header.header_bytes as u64
                + r as u64 * self.record_buf.len() as u64
                + base as u64;
            self.file
                .seek(SeekFrom::Start(offset))
                .and_then(|_| self.file.read_exact(&mut bytes))
                .map_err(|source| LacunaError::Read {
                    path: self.path.clone(),
                    source,
                })?;
            let keeping = parse_tals_strict(&bytes, &mut events).map_err(|m| fail(r, m))?;
            match first_record_onset {
                None => first_record_onset = Some(keeping),
                Some(t0) => {
                    let expect = t0 + r as f64 * self.header.record_seconds;
                    if (keeping - expect).abs() > 1e-6 * self.header.record_seconds.max(1.0) {
                        return Err(fail(
                            r,
                            format!(
                                "the record starts at {keeping} s, not {expect} s: the recording has gaps (EDF+D), which lacuna does not read"
                            ),
                        ));
                    }
                }
            }
        }
        let t0 = first_record_onset.unwrap_or(0.0);
        for e in &mut events {
            e.onset -= t0;
        }
        Ok(Some(AnnotationScan {
            events,
            first_record_onset: t0,
        }))
    }

    /// All EDF+/BDF+ annotations (not the time-keeping entries) as events,
    /// onsets relative to the first sample (see [`EdfFile::scan_annotations`]).
    pub fn annotations(&mut self) -> Result<Vec<Event>> {
        Ok(self
            .scan_annotations()?
            .map(|s| s.events)
            .unwrap_or_default())
    }
}

impl SignalSource for EdfFile {
    fn name(&self) -> String {
        self.path.display().to_string()
    }
    fn channel_names(&self) -> &[String] {
        &self.names
    }
    fn sampling_rate(&self) -> f64 {
        self.samples_per_record as f64 / self.header.record_seconds
    }
    fn n_samples(&self) -> usize {
        self.header.n_records * self.samples_per_record
    }
    fn rails(&self) -> Option<Vec<(f64, f64)>> {
        Some(
            self.channels
                .iter()
                .map(|&k| {
                    let s = &self.header.signals[k];
                    let (g, o) = s.gain_offset();
                    let (a, b) = (s.digital_min as f64 * g + o, s.digital_max as f64 * g + o);
                    (a.min(b), a.max(b))
                })
                .collect(),
        )
    }
    fn read(&mut self, start: usize, end: usize, out: &mut [Vec<f64>]) -> Result<()> {
        debug_assert!(start <= end && end <= self.n_samples());
        for o in out.iter_mut() {
            o.clear();
        }
        if start == end {
            return Ok(());
        }
        let spr = self.samples_per_record;
        let (first, last) = (start / spr, (end - 1) / spr);
        for r in first..=last {
            self.read_record(r)?;
            let from = if r == first { start - r * spr } else { 0 };
            let to = if r == last { end - r * spr } else { spr };
            for (c, o) in out.iter_mut().enumerate() {
                self.decode(self.channels[c], from, to, o);
            }
        }
        Ok(())
    }
    fn set_aside(&self) -> Vec<String> {
        self.set_aside
            .iter()
            .map(|(name, rate)| format!("{name} ({rate} Hz, not the dominant rate)"))
            .collect()
    }
    fn reopen(&self) -> Result<Box<dyn SignalSource + Send>> {
        let file = File::open(&self.path).map_err(|source| LacunaError::Read {
            path: self.path.clone(),
            source,
        })?;
        Ok(Box::new(EdfFile::from_header(
            &self.path,
            file,
            self.header.clone(),
        )?))
    }
}

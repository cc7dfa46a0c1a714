//! EDF/EDF+ (16-bit) and BDF/BDF+ (24-bit) reading and writing.
//!
//! Our own reader of the European Data Format (Kemp et al. 1992; EDF+ by
//! Kemp & Olivan 2003; BDF is the 24-bit variant with a 0xFF first byte).
//! The header is parsed and checked against the file length before any
//! data-sized allocation, so a hostile header cannot make us allocate more
//! than the file holds. Data are read record by record for a requested
//! sample range, so memory stays proportional to the range, not the file.
//! A writer exists for the demo scenario and the tests.

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::{Path, PathBuf};

use crate::error::{LacunaError, Result};
use crate::ingest::{Event, SignalSource};

/// Which member of the format family a file is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum EdfVariant {
    /// Plain EDF, 16-bit samples.
    Edf,
    /// EDF+ continuous ("EDF+C").
    EdfPlus,
    /// BDF, 24-bit samples.
    Bdf,
    /// BDF+ continuous ("BDF+C").
    BdfPlus,
}

impl EdfVariant {
    /// Bytes per stored sample.
    pub fn sample_bytes(self) -> usize {
        match self {
            EdfVariant::Edf | EdfVariant::EdfPlus => 2,
            EdfVariant::Bdf | EdfVariant::BdfPlus => 3,
        }
    }
    fn digital_range(self) -> (i64, i64) {
        match self.sample_bytes() {
            2 => (-32768, 32767),
            _ => (-8_388_608, 8_388_607),
        }
    }
    fn is_plus(self) -> bool {
        matches!(self, EdfVariant::EdfPlus | EdfVariant::BdfPlus)
    }
}

/// The per-signal header fields.
#[derive(Debug, Clone, PartialEq)]
pub struct SignalHeader {
    pub label: String,
    pub transducer: String,
    pub unit: String,
    pub physical_min: f64,
    pub physical_max: f64,
    pub digital_min: i64,
    pub digital_max: i64,
    pub prefilter: String,
    pub samples_per_record: usize,
}

impl SignalHeader {
    /// True for the EDF+/BDF+ annotation channel.
    pub fn is_annotation(&self) -> bool {
        self.label == "EDF Annotations" || self.label == "BDF Annotations"
    }
    /// Physical value = gain · digital + offset.
    pub fn gain_offset(&self) -> (f64, f64) {
        let gain =
            (self.physical_max - self.physical_min) / (self.digital_max - self.digital_min) as f64;
        (gain, self.physical_min - gain * self.digital_min as f64)
    }
}

/// A parsed and checked header.
#[derive(Debug, Clone, PartialEq)]
pub struct EdfHeader {
    pub variant: EdfVariant,
    pub patient: String,
    pub recording: String,
    pub start_date: String,
    pub start_time: String,
    pub header_bytes: usize,
    pub n_records: usize,
    pub record_seconds: f64,
    pub signals: Vec<SignalHeader>,
    /// Oddities that do not stop reading (record count −1, trailing bytes).
    pub warnings: Vec<String>,
}

impl EdfHeader {
    /// Bytes of one data record.
    pub fn record_bytes(&self) -> usize {
        self.signals
            .iter()
            .map(|s| s.samples_per_record)
            .sum::<usize>()
            * self.variant.sample_bytes()
    }
    /// Byte offset of signal `k` inside a record.
    fn signal_offset(&self, k: usize) -> usize {
        self.signals[..k]
            .iter()
            .map(|s| s.samples_per_record)
            .sum::<usize>()
            * self.variant.sample_bytes()
    }

    /// Parses and checks a header; `file_len` is the file's size in bytes.
    pub fn parse(bytes: &[u8], file_len: u64, path: &Path) -> Result<EdfHeader> {
        let fail = |message: String| LacunaError::Format {
            path: path.to_path_buf(),
            message,
        };
        if bytes.len() < 256 {
            return Err(fail(format!(
                "not an EDF/BDF file: the fixed header needs 256 bytes, the file has {}",
                bytes.len()
            )));
        }
        let text = |from: usize, len: usize| -> String {
            bytes[from..from + len]
                .iter()
                .map(|&b| if b.is_ascii() { b as char } else { '?' })
                .collect::<String>()
                .trim()
                .to_string()
        };
        let reserved = text(192, 44);
        let variant = if bytes[0] == 0xFF {
            // BDF: the 0xFF signature decides; the reserved field ("24BIT",
            // "BDF+C") is often missing in real files, so it is only consulted
            // for the + variant.
            if reserved.starts_with("BDF+D") {
                return Err(fail(
                    "discontinuous BDF+ (BDF+D) is not supported; convert it to a continuous file"
                        .into(),
                ));
            }
            if reserved.starts_with("BDF+") {
                EdfVariant::BdfPlus
            } else {
                EdfVariant::Bdf
            }
        } else if &bytes[0..8] == b"0       " {
            if reserved.starts_with("EDF+D") {
                return Err(fail(
                    "discontinuous EDF+ (EDF+D) is not supported; convert it to a continuous file"
                        .into(),
                ));
            }
            if reserved.starts_with("EDF+") {
                EdfVariant::EdfPlus
            } else {
                EdfVariant::Edf
            }
        } else {
            return Err(fail(
                "not an EDF/BDF file: the version field is neither \"0\" (EDF) nor 0xFF (BDF)"
                    .into(),
            ));
        };
        let number = |from: usize, len: usize, what: &str| -> Result<f64> {
            let t = text(from, len);
            t.parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .ok_or_else(|| fail(format!("header field '{what}' is not a number: {t:?}")))
        };
        let count = |from: usize, len: usize, what: &str| -> Result<i64> {
            let t = text(from, len);
            t.parse::<i64>()
                .map_err(|_| fail(format!("header field '{what}' is not an integer: {t:?}")))
        };
        let header_bytes = count(184, 8, "number of bytes in header")?;
        let n_records = count(236, 8, "number of data records")?;
        let record_seconds = number(244, 8, "duration of a data record")?;
        let ns = count(252, 4, "number of signals")?;
        if ns < 1 {
            return Err(fail(format!("the header declares {ns} signals")));
        }
        let ns = ns as usize;
        let expected = 256 * (ns as u64 + 1);
        if header_bytes < 0 || header_bytes as u64 != expected {
            return Err(fail(format!(
                "inconsistent header: {ns} signals need a {expected}-byte header, the header declares {header_bytes} bytes"
            )));
        }
        if file_len < expected || (bytes.len() as u64) < expected {
            return Err(fail(format!(
                "truncated header: {ns} signals need {expected} bytes, the file has {file_len}"
            )));
        }
        if !(record_seconds > 0.0) {
            return Err(fail(format!(
                "record duration must be positive, the header says {record_seconds} s"
            )));
        }
        let field = |k: usize, offset: usize, width: usize| 256 + offset * ns + k * width;
        // Offsets (in units of ns) of each per-signal field.
        let (o_label, o_trans, o_unit, o_pmin, o_pmax, o_dmin, o_dmax, o_pre, o_spr) =
            (0, 16, 96, 104, 112, 120, 128, 136, 216);
        let (lo, hi) = variant.digital_range();
        let mut signals = Vec::with_capacity(ns);
        for k in 0..ns {
            let label = text(field(k, o_label, 16), 16);
            let name = if label.is_empty() {
                format!("signal {}", k + 1)
            } else {
                label.clone()
            };
            let signal = SignalHeader {
                label,
                transducer: text(field(k, o_trans, 80), 80),
                unit: text(field(k, o_unit, 8), 8),
                physical_min: number(field(k, o_pmin, 8), 8, &format!("{name}: physical minimum"))?,
                physical_max: number(field(k, o_pmax, 8), 8, &format!("{name}: physical maximum"))?,
                digital_min: count(field(k, o_dmin, 8), 8, &format!("{name}: digital minimum"))?,
                digital_max: count(field(k, o_dmax, 8), 8, &format!("{name}: digital maximum"))?,
                prefilter: text(field(k, o_pre, 80), 80),
                samples_per_record: {
                    let n = count(
                        field(k, o_spr, 8),
                        8,
                        &format!("{name}: samples per record"),
                    )?;
                    if !(1..=1 << 24).contains(&n) {
                        return Err(fail(format!(
                            "signal {name}: {n} samples per record is out of range"
                        )));
                    }
                    n as usize
                },
            };
            if !signal.is_annotation() {
                if signal.digital_max <= signal.digital_min
                    || signal.digital_min < lo
                    || signal.digital_max > hi
                {
                    return Err(fail(format!(
                        "signal {name}: digital range [{}, {}] is empty or outside the format's [{lo}, {hi}]",
                        signal.digital_min, signal.digital_max
                    )));
                }
                if signal.physical_max == signal.physical_min {
                    return Err(fail(format!(
                        "signal {name}: physical minimum equals physical maximum ({})",
                        signal.physical_min
                    )));
                }
            }
            signals.push(signal);
        }
        let mut header = EdfHeader {
            variant,
            patient: text(8, 80),
            recording: text(88, 80),
            start_date: text(168, 8),
            start_time: text(176, 8),
            header_bytes: expected as usize,
            n_records: 0,
            record_seconds,
            signals,
            warnings: Vec::new(),
        };
        let record_bytes = header.record_bytes() as u64;
        let data_bytes = file_len - expected;
        let available = data_bytes / record_bytes;
        header.n_records = if n_records == -1 {
            // Allowed while recording; the file length decides.
            header.warnings.push(format!(
                "the header's record count is -1 (file still being written?); {available} records counted from the file size"
            ));
            available as usize
        } else if n_records > 0
            && data_bytes > n_records as u64 * record_bytes
            && data_bytes.is_multiple_of(n_records as u64)
            && data_bytes / n_records as u64 != record_bytes
        {
            // The data are whole records of another size: the
            // samples-per-record fields disagree with what was written.
            return Err(fail(format!(
                "the samples-per-record fields (header bytes 256 + 216·ns onwards) add up to {record_bytes} bytes per record, but the {data_bytes} data bytes are {n_records} records of {} bytes: a samples-per-record field is wrong; reading on would shift every channel",
                data_bytes / n_records as u64
            )));
        } else if n_records < 0 {
            return Err(fail(format!(
                "the header declares {n_records} data records"
            )));
        } else if (n_records as u64) > available {
            return Err(fail(format!(
                "truncated or inconsistent file: the header declares {n_records} records of {record_bytes} bytes, the file holds {available} complete records ({data_bytes} data bytes)"
            )));
        } else {
            n_records as usize
        };
        if header.n_records == 0 {
            return Err(fail("the file holds no data records".into()));
        }
        let extra = data_bytes - header.n_records as u64 * record_bytes;
        if extra > 0 {
            header.warnings.push(format!(
                "{extra} bytes after the last of {} data records were ignored",
                header.n_records
            ));
        }
        Ok(header)
    }
}

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

/// What the annotation signal of an EDF+/BDF+ file holds.
#[derive(Debug, Clone)]
pub struct AnnotationScan {
    /// Annotations as events, onsets relative to the first sample.
    pub events: Vec<Event>,
    /// Time-keeping onset of the first data record, seconds after the
    /// header's start time.
    pub first_record_onset: f64,
}

/// Parses one record's annotation bytes strictly (EDF+ specification §2.2):
/// TALs `+onset[\x15duration]\x14text\x14…\x14\x00`, the first one the
/// record's time-keeping TAL (empty text), then only zero padding. Returns
/// the time-keeping onset; refuses anything else naming the byte offset.
fn parse_tals_strict(bytes: &[u8], events: &mut Vec<Event>) -> std::result::Result<f64, String> {
    let number = |t: &str, signed: bool| -> bool {
        let body = if signed {
            match t.strip_prefix(['+', '-']) {
                Some(b) => b,
                None => return false,
            }
        } else {
            t
        };
        let mut parts = body.splitn(2, '.');
        let int = parts.next().unwrap_or("");
        let frac = parts.next();
        !int.is_empty()
            && int.bytes().all(|b| b.is_ascii_digit())
            && frac.is_none_or(|f| f.bytes().all(|b| b.is_ascii_digit()))
    };
    let mut pos = 0;
    let mut keeping = None;
    while pos < bytes.len() && bytes[pos] != 0 {
        let Some(end) = bytes[pos..].windows(2).position(|w| w == [0x14, 0]) else {
            return Err(format!(
                "the annotation starting at byte {pos} is not terminated by 0x14 0x00 before the end of the signal"
            ));
        };
        let tal = &bytes[pos..pos + end + 1];
        let text = std::str::from_utf8(tal)
            .map_err(|_| format!("the annotation at byte {pos} is not UTF-8 text"))?;
        let mut fields = text.split('\u{14}');
        let stamp = fields.next().unwrap_or("");
        let (onset, duration) = match stamp.split_once('\u{15}') {
            Some((o, d)) => (o, Some(d)),
            None => (stamp, None),
        };
        if !number(onset, true) {
            return Err(format!(
                "the onset {onset:?} at byte {pos} is not a signed number (+seconds or -seconds)"
            ));
        }
        let onset_s: f64 = onset
            .parse()
            .map_err(|_| format!("onset {onset:?} at byte {pos}"))?;
        let duration_s = match duration {
            Some(d) if number(d, false) => d.parse().unwrap_or(0.0),
            Some(d) => {
                return Err(format!("the duration {d:?} at byte {pos} is not a number"));
            }
            None => 0.0,
        };
        if !onset_s.is_finite() || onset_s.abs() > 1e9 {
            return Err(format!("the onset {onset} at byte {pos} is out of range"));
        }
        let texts: Vec<&str> = fields.collect();
        if keeping.is_none() {
            // The first TAL of a record keeps time: its first text is empty.
            if texts.first().is_none_or(|t| !t.is_empty()) {
                return Err(format!(
                    "the first annotation (byte {pos}) is not the record's time-keeping annotation (+onset followed by 0x14 0x14)"
                ));
            }
            keeping = Some(onset_s);
        }
        for label in texts {
            let label = label.trim();
            if !label.is_empty() {
                events.push(Event {
                    onset: onset_s,
                    duration: duration_s,
                    label: label.to_string(),
                });
            }
        }
        pos += end + 2;
    }
    if let Some(k) = bytes[pos..].iter().position(|&b| b != 0) {
        return Err(format!(
            "byte {} after the last annotation is {:#04x}, not zero padding",
            pos + k,
            bytes[pos + k]
        ));
    }
    keeping.ok_or_else(|| "the record has no time-keeping annotation".to_string())
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

/// What to write: one physical signal per channel, all at one rate.
pub struct EdfWriteSpec<'a> {
    pub variant: EdfVariant,
    pub channel_names: &'a [String],
    pub unit: &'a str,
    /// Physical range mapped onto the full digital range.
    pub physical_range: (f64, f64),
    pub sampling_rate: usize,
    pub record_seconds: usize,
    pub patient: &'a str,
    pub recording: &'a str,
    /// Annotations (written in an annotation signal for the + variants).
    pub events: &'a [Event],
}

/// Writes an EDF/BDF(+) file (atomically: temporary file, then rename).
/// `signals[c]` holds channel c's physical samples; values outside the
/// physical range are clipped to it, as an amplifier would rail; NaN is
/// written as the digital minimum.
pub fn write_edf(path: &Path, spec: &EdfWriteSpec, signals: &[Vec<f64>]) -> Result<()> {
    let bytes = encode_edf(spec, signals)?;
    crate::output::write_atomic(path, &bytes)
}

/// Encodes an EDF/BDF(+) file in memory (see [`write_edf`]).
pub fn encode_edf(spec: &EdfWriteSpec, signals: &[Vec<f64>]) -> Result<Vec<u8>> {
    let p = spec.channel_names.len();
    if signals.len() != p || p == 0 {
        return Err(LacunaError::InvalidOption(format!(
            "{} signals for {p} channel names",
            signals.len()
        )));
    }
    let n = signals[0].len();
    if signals.iter().any(|s| s.len() != n) {
        return Err(LacunaError::InvalidOption(
            "signals of unequal length".into(),
        ));
    }
    let spr = spec.sampling_rate * spec.record_seconds;
    let n_records = n.div_ceil(spr).max(1);
    let bps = spec.variant.sample_bytes();
    let (dmin, dmax) = spec.variant.digital_range();
    let (pmin, pmax) = spec.physical_range;
    let plus = spec.variant.is_plus();
    // Annotation bytes per record: time-keeping TAL plus this record's events.
    let mut tals: Vec<Vec<u8>> = (0..n_records)
        .map(|r| format!("+{}\x14\x14\x00", r * spec.record_seconds).into_bytes())
        .collect();
    if plus {
        for e in spec.events {
            let r = ((e.onset / spec.record_seconds as f64).floor().max(0.0) as usize)
                .min(n_records - 1);
            let tal = if e.duration > 0.0 {
                format!("+{}\x15{}\x14{}\x14\x00", e.onset, e.duration, e.label)
            } else {
                format!("+{}\x14{}\x14\x00", e.onset, e.label)
            };
            tals[r].extend_from_slice(tal.as_bytes());
        }
    }
    let annot_samples = if plus {
        tals.iter().map(Vec::len).max().unwrap_or(0).div_ceil(bps) + 1
    } else {
        0
    };
    let ns = p + usize::from(plus);
    let mut h = Vec::with_capacity(256 * (ns + 1));
    let put = |h: &mut Vec<u8>, s: &str, width: usize| {
        let mut b: Vec<u8> = s
            .bytes()
            .filter(|c| c.is_ascii() && *c >= 32)
            .take(width)
            .collect();
        b.resize(width, b' ');
        h.extend_from_slice(&b);
    };
    match spec.variant {
        EdfVariant::Bdf | EdfVariant::BdfPlus => {
            h.push(0xFF);
            put(&mut h, "BIOSEMI", 7);
        }
        _ => put(&mut h, "0", 8),
    }
    put(&mut h, spec.patient, 80);
    put(&mut h, spec.recording, 80);
    put(&mut h, "01.01.26", 8);
    put(&mut h, "00.00.00", 8);
    put(&mut h, &(256 * (ns + 1)).to_string(), 8);
    let reserved = match spec.variant {
        EdfVariant::Edf => "",
        EdfVariant::EdfPlus => "EDF+C",
        EdfVariant::Bdf => "24BIT",
        EdfVariant::BdfPlus => "BDF+C",
    };
    put(&mut h, reserved, 44);
    put(&mut h, &n_records.to_string(), 8);
    put(&mut h, &spec.record_seconds.to_string(), 8);
    put(&mut h, &ns.to_string(), 4);
    let annot_label = if bps == 3 {
        "BDF Annotations"
    } else {
        "EDF Annotations"
    };
    let each = |h: &mut Vec<u8>, width: usize, f: &dyn Fn(usize) -> String| {
        for k in 0..ns {
            put(h, &f(k), width);
        }
    };
    let is_annot = |k: usize| k == p;
    each(&mut h, 16, &|k| {
        if is_annot(k) {
            annot_label.into()
        } else {
            spec.channel_names[k].clone()
        }
    });
    each(&mut h, 80, &|k| {
        if is_annot(k) {
            String::new()
        } else {
            "simulated electrode".into()
        }
    });
    each(&mut h, 8, &|k| {
        if is_annot(k) {
            String::new()
        } else {
            spec.unit.into()
        }
    });
    each(&mut h, 8, &|k| {
        if is_annot(k) {
            "-1".into()
        } else {
            format_edf_number(pmin)
        }
    });
    each(&mut h, 8, &|k| {
        if is_annot(k) {
            "1".into()
        } else {
            format_edf_number(pmax)
        }
    });
    each(&mut h, 8, &|_| dmin.to_string());
    each(&mut h, 8, &|_| dmax.to_string());
    each(&mut h, 80, &|k| {
        if is_annot(k) {
            String::new()
        } else {
            "none".into()
        }
    });
    each(&mut h, 8, &|k| {
        if is_annot(k) {
            annot_samples.to_string()
        } else {
            spr.to_string()
        }
    });
    each(&mut h, 32, &|_| String::new());
    let gain = (pmax - pmin) / (dmax - dmin) as f64;
    let record_bytes = (p * spr + annot_samples) * bps;
    let mut out = h;
    out.reserve(n_records * record_bytes);
    for (r, tal) in tals.iter().enumerate() {
        for s in signals {
            for i in r * spr..(r + 1) * spr {
                let x = s.get(i).copied().unwrap_or(0.0);
                let d = if x.is_nan() {
                    dmin
                } else {
                    (((x - pmin) / gain).round() as i64 + dmin).clamp(dmin, dmax)
                };
                out.extend_from_slice(&d.to_le_bytes()[..bps]);
            }
        }
        if plus {
            let mut t = tal.clone();
            t.resize(annot_samples * bps, 0);
            out.extend_from_slice(&t);
        }
    }
    Ok(out)
}

/// An 8-character EDF number field.
fn format_edf_number(x: f64) -> String {
    let s = format!("{x}");
    if s.len() <= 8 { s } else { format!("{x:.0}") }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Round trip through our writer: digital resolution bounds the error
    // (common practice, no source).
    #[test]
    fn round_trip_edf_and_bdf() {
        let names: Vec<String> = (0..3).map(|c| format!("E{c}")).collect();
        let signals: Vec<Vec<f64>> = (0..3)
            .map(|c| {
                (0..600)
                    .map(|i| 50.0 * ((i as f64) * 0.05 * (c + 1) as f64).sin())
                    .collect()
            })
            .collect();
        let events = [Event {
            onset: 1.5,
            duration: 0.5,
            label: "cue".into(),
        }];
        for variant in [EdfVariant::EdfPlus, EdfVariant::Bdf] {
            let spec = EdfWriteSpec {
                variant,
                channel_names: &names,
                unit: "uV",
                physical_range: (-200.0, 200.0),
                sampling_rate: 100,
                record_seconds: 1,
                patient: "X",
                recording: "test",
                events: &events,
            };
            let dir =
                std::env::temp_dir().join(format!("lacuna-edf-{variant:?}-{}", std::process::id()));
            std::fs::create_dir_all(&dir).unwrap();
            let path = dir.join("x.edf");
            write_edf(&path, &spec, &signals).unwrap();
            let mut f = EdfFile::open(&path).unwrap();
            assert_eq!(f.header.variant, variant);
            assert_eq!(f.channel_names(), &names[..]);
            assert_eq!(f.n_samples(), 600);
            let mut out = vec![Vec::new(); 3];
            f.read(130, 470, &mut out).unwrap();
            let res = 400.0 / (variant.digital_range().1 - variant.digital_range().0) as f64;
            for c in 0..3 {
                for (j, v) in out[c].iter().enumerate() {
                    assert!((v - signals[c][130 + j]).abs() <= res * 0.51 + 1e-12);
                }
            }
            let ev = f.annotations().unwrap();
            if variant == EdfVariant::EdfPlus {
                assert_eq!(ev, events.to_vec());
            } else {
                assert!(ev.is_empty());
            }
            std::fs::remove_dir_all(&dir).ok();
        }
    }
}

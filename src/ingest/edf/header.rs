//! The EDF/BDF header: fixed fields, per-signal fields, and the checks
//! against the file length made before any data-sized allocation.

use std::path::Path;

use crate::error::{LacunaError, Result};

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
    pub(super) fn digital_range(self) -> (i64, i64) {
        match self.sample_bytes() {
            2 => (-32768, 32767),
            _ => (-8_388_608, 8_388_607),
        }
    }
    pub(super) fn is_plus(self) -> bool {
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
    pub(super) fn signal_offset(&self, k: usize) -> usize {
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

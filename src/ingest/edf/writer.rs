//! Writing EDF/BDF files (the demo scenario and the tests).

use std::path::Path;

use super::*;
use crate::error::{LacunaError, Result};
use crate::ingest::Event;

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

//! EDF+/BDF+ annotations: time-stamped annotation lists (TALs) parsed
//! strictly, as events.

use crate::ingest::Event;

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
pub(super) fn parse_tals_strict(
    bytes: &[u8],
    events: &mut Vec<Event>,
) -> std::result::Result<f64, String> {
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

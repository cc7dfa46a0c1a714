//! Text inputs: continuous signals as CSV and event lists as CSV.
//!
//! Signal CSV: a header row of channel names, then one row per sample, one
//! column per channel. Empty cells, `nan` and `NaN` are read as NaN (a lost
//! sample, which detection will mask). Events CSV: a header with at least
//! `onset` and `label` (seconds from the start of the recording), and
//! optionally `duration`. Every bad cell is reported with its row and column.

use std::path::Path;

use crate::error::{LacunaError, Result};
use crate::ingest::{Event, InMemorySource};

fn format_err(path: &Path, message: String) -> LacunaError {
    LacunaError::Format {
        path: path.to_path_buf(),
        message,
    }
}

fn reader(path: &Path) -> Result<csv::Reader<std::fs::File>> {
    crate::trials::io::require_regular(path)?;
    csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .from_path(path)
        .map_err(|e| match e.into_kind() {
            csv::ErrorKind::Io(source) => LacunaError::Read {
                path: path.to_path_buf(),
                source,
            },
            other => format_err(path, format!("{other:?}")),
        })
}

/// Reads a continuous recording from CSV (samples × channels).
pub fn read_signal_csv(path: &Path, rate: f64) -> Result<InMemorySource> {
    if !(rate > 0.0 && rate.is_finite()) {
        return Err(LacunaError::InvalidOption(format!(
            "sampling rate must be positive, got {rate}"
        )));
    }
    let mut rdr = reader(path)?;
    let channels: Vec<String> = rdr
        .headers()
        .map_err(|e| format_err(path, format!("cannot read the header row: {e}")))?
        .iter()
        .map(str::to_string)
        .collect();
    if channels.is_empty() || channels.iter().any(String::is_empty) {
        return Err(format_err(
            path,
            "the header row must name every channel (no empty names)".into(),
        ));
    }
    let mut data: Vec<Vec<f64>> = vec![Vec::new(); channels.len()];
    for (r, record) in rdr.records().enumerate() {
        let row = r + 2; // 1-based, after the header
        let record = record.map_err(|e| format_err(path, format!("row {row}: {e}")))?;
        if record.len() != channels.len() {
            return Err(format_err(
                path,
                format!(
                    "row {row} has {} cells, the header names {} channels",
                    record.len(),
                    channels.len()
                ),
            ));
        }
        for (c, cell) in record.iter().enumerate() {
            let v = if cell.is_empty() || cell.eq_ignore_ascii_case("nan") {
                f64::NAN
            } else {
                cell.parse::<f64>().map_err(|_| {
                    format_err(
                        path,
                        format!(
                            "row {row}, column {} (channel {}): {cell:?} is not a number",
                            c + 1,
                            channels[c]
                        ),
                    )
                })?
            };
            data[c].push(v);
        }
    }
    if data[0].is_empty() {
        return Err(format_err(path, "the file holds no samples".into()));
    }
    Ok(InMemorySource {
        name: path.display().to_string(),
        channels,
        rate,
        data: std::sync::Arc::new(data),
        rails: None,
    })
}

/// Reads an events CSV (`onset`, optional `duration`, `label`).
pub fn read_events_csv(path: &Path) -> Result<Vec<Event>> {
    let mut rdr = reader(path)?;
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| format_err(path, format!("cannot read the header row: {e}")))?
        .iter()
        .map(|h| h.to_ascii_lowercase())
        .collect();
    let col = |name: &str| header.iter().position(|h| h == name);
    let (Some(onset_col), Some(label_col)) = (col("onset"), col("label")) else {
        return Err(format_err(
            path,
            format!(
                "an events CSV needs the columns onset and label (duration optional); the header has {header:?}"
            ),
        ));
    };
    let duration_col = col("duration");
    let mut events = Vec::new();
    for (r, record) in rdr.records().enumerate() {
        let row = r + 2;
        let record = record.map_err(|e| format_err(path, format!("row {row}: {e}")))?;
        let number = |c: usize, what: &str| -> Result<f64> {
            let cell = record.get(c).unwrap_or("");
            cell.parse::<f64>()
                .ok()
                .filter(|v| v.is_finite())
                .ok_or_else(|| {
                    format_err(
                        path,
                        format!(
                            "row {row}, column {} ({what}): {cell:?} is not a finite number",
                            c + 1
                        ),
                    )
                })
        };
        let onset = number(onset_col, "onset")?;
        let duration = match duration_col {
            Some(c) => number(c, "duration")?,
            None => 0.0,
        };
        if duration < 0.0 {
            return Err(format_err(
                path,
                format!("row {row}: negative duration {duration}"),
            ));
        }
        let label = record.get(label_col).unwrap_or("").to_string();
        if label.is_empty() {
            return Err(format_err(path, format!("row {row}: empty label")));
        }
        events.push(Event {
            onset,
            duration,
            label,
        });
    }
    Ok(events)
}

/// Encodes events as CSV (`onset,duration,label`).
pub fn encode_events_csv(events: &[Event]) -> Vec<u8> {
    let mut s = String::from("onset,duration,label\n");
    for e in events {
        s.push_str(&format!("{},{},{}\n", e.onset, e.duration, e.label));
    }
    s.into_bytes()
}

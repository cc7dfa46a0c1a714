//! Epoching: which sample ranges become trials.
//!
//! Either from events (each event's onset plus an offset, for a fixed
//! length; the event's label becomes the trial's label) or fixed windows
//! with a step (overlap when the step is shorter than the window). Ready
//! epochs from an NPY file (N × p × T) are turned into an in-memory source
//! with one isolated epoch per trial.

use std::path::Path;

use crate::error::{LacunaError, Result};
use crate::ingest::{Event, InMemorySource, SignalSource};
use crate::trials::npy::{NpyData, read_npy};

/// One epoch: samples `start..start + len` of the source.
#[derive(Debug, Clone, PartialEq)]
pub struct EpochSpec {
    pub start: usize,
    pub len: usize,
    /// Onset in seconds (of the epoch, not of its event).
    pub onset: f64,
    pub label: Option<String>,
}

/// How to cut epochs.
#[derive(Debug, Clone)]
pub enum Windowing {
    /// Around events: [onset + offset, onset + offset + length) seconds.
    /// `keep` limits the labels used (empty = all).
    Events {
        events: Vec<Event>,
        offset: f64,
        length: f64,
        keep: Vec<String>,
    },
    /// Consecutive windows of `length` seconds every `step` seconds.
    Fixed { length: f64, step: f64 },
}

/// Plans the epochs of one source. Events whose window falls outside the
/// recording are an error naming the event (nothing is silently dropped).
pub fn plan_epochs(source: &dyn SignalSource, windowing: &Windowing) -> Result<Vec<EpochSpec>> {
    let fs = source.sampling_rate();
    let n = source.n_samples();
    let duration = n as f64 / fs;
    match windowing {
        Windowing::Fixed { length, step } => {
            if !(*length > 0.0 && *step > 0.0) {
                return Err(LacunaError::InvalidOption(format!(
                    "window length and step must be positive (got {length} s and {step} s)"
                )));
            }
            let len = (length * fs).round() as usize;
            let hop = ((step * fs).round() as usize).max(1);
            if len < 2 || len > n {
                return Err(LacunaError::InvalidOption(format!(
                    "{}: a {length} s window is {len} samples; the recording has {n} ({duration:.1} s)",
                    source.name()
                )));
            }
            Ok((0..=(n - len) / hop)
                .map(|k| EpochSpec {
                    start: k * hop,
                    len,
                    onset: (k * hop) as f64 / fs,
                    label: None,
                })
                .collect())
        }
        Windowing::Events {
            events,
            offset,
            length,
            keep,
        } => {
            if !(*length > 0.0) {
                return Err(LacunaError::InvalidOption(format!(
                    "epoch length must be positive (got {length} s)"
                )));
            }
            let len = (length * fs).round() as usize;
            if len < 2 {
                return Err(LacunaError::InvalidOption(format!(
                    "{}: a {length} s epoch is {len} sample(s) at {fs} Hz; a covariance needs at least 2",
                    source.name()
                )));
            }
            // Work is bounded by the recording: the epochs may read it at
            // most 64 times over (heavily overlapping events), which keeps
            // time and memory in proportion to the input.
            if events.len() as f64 * len as f64 > 64.0 * n as f64 {
                return Err(LacunaError::Unsupported(format!(
                    "{}: {} events of {len} samples would read the {n}-sample recording {:.0} times over (at most 64); check the events file (onsets in seconds?) and --length",
                    source.name(),
                    events.len(),
                    events.len() as f64 * len as f64 / n as f64
                )));
            }
            let mut out = Vec::new();
            let mut outside = Vec::new();
            for (k, e) in events.iter().enumerate() {
                if !keep.is_empty() && !keep.contains(&e.label) {
                    continue;
                }
                let t0 = e.onset + offset;
                let start = (t0 * fs).round();
                // In floating point: a huge or non-finite onset must not
                // overflow the sample arithmetic (it is simply outside).
                if !(start >= 0.0) || start + len as f64 > n as f64 {
                    outside.push(format!(
                        "event {} ({} at {} s): window {:.3}–{:.3} s",
                        k + 1,
                        e.label,
                        e.onset,
                        t0,
                        t0 + length
                    ));
                    continue;
                }
                out.push(EpochSpec {
                    start: start as usize,
                    len,
                    onset: t0,
                    label: Some(e.label.clone()),
                });
            }
            if !outside.is_empty() {
                let shown: Vec<_> = outside.iter().take(10).cloned().collect();
                return Err(LacunaError::Unsupported(format!(
                    "{}: {} event window(s) fall outside the recording (0–{duration:.3} s): {}{}",
                    source.name(),
                    outside.len(),
                    shown.join("; "),
                    if outside.len() > 10 { "; …" } else { "" }
                )));
            }
            if out.is_empty() {
                return Err(LacunaError::Unsupported(format!(
                    "{}: no events to epoch (check the events file and --labels)",
                    source.name()
                )));
            }
            Ok(out)
        }
    }
}

/// Reads ready epochs (NPY, N × p × T, float32/float64) as an in-memory
/// source of N back-to-back epochs, and their specs.
pub fn read_npy_epochs(
    path: &Path,
    rate: f64,
    channels: Option<Vec<String>>,
) -> Result<(InMemorySource, Vec<EpochSpec>)> {
    let arr = read_npy(path)?;
    let fail = |message: String| LacunaError::Format {
        path: path.to_path_buf(),
        message,
    };
    let [n, p, t] = arr.shape[..] else {
        return Err(fail(format!(
            "epochs must have shape (N, p, T), the file has {:?}",
            arr.shape
        )));
    };
    if n == 0 || p == 0 || t < 2 {
        return Err(fail(format!("empty epochs array of shape {:?}", arr.shape)));
    }
    let NpyData::Float(v) = arr.data else {
        return Err(fail(format!(
            "epochs must be float32 or float64, the file holds {}",
            arr.descr
        )));
    };
    let channels = channels.unwrap_or_else(|| crate::trials::default_channel_names(p));
    if channels.len() != p {
        return Err(fail(format!(
            "{} channel names given for {p} channels",
            channels.len()
        )));
    }
    let mut data = vec![Vec::with_capacity(n * t); p];
    for e in 0..n {
        for (c, d) in data.iter_mut().enumerate() {
            d.extend_from_slice(&v[(e * p + c) * t..(e * p + c + 1) * t]);
        }
    }
    let specs = (0..n)
        .map(|e| EpochSpec {
            start: e * t,
            len: t,
            onset: (e * t) as f64 / rate,
            label: None,
        })
        .collect();
    Ok((
        InMemorySource {
            name: path.display().to_string(),
            channels,
            rate,
            data: std::sync::Arc::new(data),
            rails: None,
        },
        specs,
    ))
}

//! The extraction job: recordings (EDF/BDF/CSV) or ready epochs → epochs →
//! detection with a reason per masked cell → covariance per epoch on its
//! observed channels. `lacuna extract` and the Python package's
//! `lacuna.extract` both run [`ExtractJob::run`]; writing files stays with
//! the caller.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::ingest::covariance::Estimator;
use crate::ingest::detect::DetectOptions;
use crate::ingest::edf::EdfFile;
use crate::ingest::epochs::{EpochSpec, Windowing, plan_epochs, read_npy_epochs};
use crate::ingest::pipeline::{ExtractOptions, Extraction, SessionInput, extract};
use crate::ingest::text::{read_events_csv, read_signal_csv};
use crate::ingest::{Event, SignalSource};
use crate::trials::TrialSet;
use crate::trials::io::read_mask;
use crate::{LacunaError, Result};

/// What to extract, with the CLI's defaults (`lacuna extract --help`).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct ExtractJob {
    /// Recordings, one per session (EDF/BDF sniffed from the header; .csv with `rate`).
    pub recordings: Vec<PathBuf>,
    /// Ready epochs (NPY, N × p × T) instead of recordings; needs `rate`.
    pub epochs: Option<PathBuf>,
    /// Events CSVs, one per recording (default: EDF+/BDF+ annotations).
    pub events: Vec<PathBuf>,
    /// Sampling rate (Hz) of CSV recordings and NPY epochs.
    pub rate: Option<f64>,
    /// Epoch start relative to each event (s).
    pub offset: f64,
    /// Epoch length (s); default the events' common duration.
    pub length: Option<f64>,
    /// Fixed windows of this length (s) instead of events, every `step` s.
    pub window: Option<f64>,
    pub step: Option<f64>,
    /// Keep only events with these labels (all when empty).
    pub labels: Vec<String>,
    /// Band-pass edges "lo-hi" in Hz.
    pub band: Option<String>,
    /// Butterworth order of the band-pass.
    pub order: usize,
    /// Covariance estimator: oas, ledoit-wolf or sample.
    pub estimator: String,
    /// Automatic detection off: only missing samples and `bad`/`mask` count.
    pub no_detect: bool,
    pub amplitude_z: f64,
    pub broadband_z: f64,
    pub min_correlation: f64,
    pub flat_ratio: f64,
    pub rail_fraction: f64,
    /// Channels to keep, by name (all when empty).
    pub channels: Vec<String>,
    /// Channels to mask in every epoch.
    pub bad: Vec<String>,
    /// A mask CSV (header of channel names, one 0/1 row per epoch) of your own.
    pub mask: Option<PathBuf>,
    /// Do not read EDF+/BDF+ annotations.
    pub skip_annotations: bool,
    /// Physical unit of the data, when the files do not say.
    pub unit: Option<String>,
}

impl Default for ExtractJob {
    fn default() -> Self {
        let d = DetectOptions::default();
        ExtractJob {
            recordings: Vec::new(),
            epochs: None,
            events: Vec::new(),
            rate: None,
            offset: 0.0,
            length: None,
            window: None,
            step: None,
            labels: Vec::new(),
            band: None,
            order: 4,
            estimator: "oas".into(),
            no_detect: false,
            amplitude_z: d.amplitude_z,
            broadband_z: d.broadband_z,
            min_correlation: d.min_correlation,
            flat_ratio: d.flat_ratio,
            rail_fraction: d.rail_fraction,
            channels: Vec::new(),
            bad: Vec::new(),
            mask: None,
            skip_annotations: false,
            unit: None,
        }
    }
}

/// Everything one extraction produced.
pub struct ExtractRun {
    pub extraction: Extraction,
    /// The trial set (epochs with at least one observed channel).
    pub set: TrialSet,
    /// (session, source name) of every input.
    pub sources: Vec<(String, String)>,
    pub options: ExtractOptions,
    /// Physical unit: `unit`, else the EDF/BDF headers' when all channels share one.
    pub unit: Option<String>,
    /// Header warnings of the recordings, and notes (channels set aside).
    pub warnings: Vec<String>,
    pub notes: Vec<String>,
    pub elapsed_seconds: f64,
}

impl ExtractJob {
    /// Runs the extraction; `progress(done, total)` counts samples.
    pub fn run(&self, progress: &(dyn Fn(u64, u64) + Sync)) -> Result<ExtractRun> {
        self.validate()?;
        let mut warnings = Vec::new();
        let mut notes = Vec::new();
        let estimator =
            Estimator::parse(&self.estimator).ok_or_else(|| LacunaError::UnknownName {
                setting: "estimator".into(),
                value: self.estimator.clone(),
                valid: ["oas", "ledoit-wolf", "sample"].map(String::from).to_vec(),
                closest: None,
            })?;
        let band = self.band.as_deref().map(parse_band).transpose()?;
        let mut inputs = Vec::new();
        let mut edf_units: Vec<String> = Vec::new();
        if let Some(path) = &self.epochs {
            let rate = self.rate.ok_or_else(|| LacunaError::MissingSetting {
                setting: "rate".into(),
                needed_for: "ready epochs (NPY)".into(),
            })?;
            let names = (!self.channels.is_empty()).then(|| self.channels.clone());
            let (source, epochs) = read_npy_epochs(path, rate, names)?;
            inputs.push(SessionInput {
                session: session_name(path),
                source: Box::new(source),
                epochs,
                isolated: true,
            });
        } else {
            if self.recordings.is_empty() {
                return Err(LacunaError::InvalidOption(
                    "give one or more recordings (EDF/BDF/CSV), or ready epochs (NPY)".into(),
                ));
            }
            if !self.events.is_empty() && self.events.len() != self.recordings.len() {
                return Err(LacunaError::InvalidOption(format!(
                    "{} events files for {} recordings: give one per recording, in the same order",
                    self.events.len(),
                    self.recordings.len()
                )));
            }
            for (k, path) in self.recordings.iter().enumerate() {
                let is_csv = path
                    .extension()
                    .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
                let (source, annotations): (Box<dyn SignalSource + Send>, Vec<Event>) = if is_csv {
                    let rate = self.rate.ok_or_else(|| LacunaError::MissingSetting {
                        setting: "rate".into(),
                        needed_for: format!(
                            "{} (a CSV recording carries no sampling rate)",
                            path.display()
                        ),
                    })?;
                    (Box::new(read_signal_csv(path, rate)?), Vec::new())
                } else {
                    let mut f = EdfFile::open(path)?;
                    edf_units.extend(f.units());
                    for w in &f.header.warnings {
                        warnings.push(format!("{}: {w}", path.display()));
                    }
                    // The annotation signal of every EDF+/BDF+ file is checked
                    // (unless skipped); annotations are the events only when no
                    // events file or fixed windows were asked for.
                    let scanned = if self.skip_annotations {
                        Vec::new()
                    } else {
                        f.annotations()?
                    };
                    let ann = if self.events.is_empty() && self.window.is_none() {
                        scanned
                    } else {
                        Vec::new()
                    };
                    if !f.set_aside.is_empty() {
                        notes.push(format!(
                            "{}: set aside (other sampling rate): {}",
                            path.display(),
                            f.set_aside
                                .iter()
                                .map(|(n, r)| format!("{n} ({r} Hz)"))
                                .collect::<Vec<_>>()
                                .join(", ")
                        ));
                    }
                    (Box::new(f), ann)
                };
                let events = match self.events.get(k) {
                    Some(e) => read_events_csv(e)?,
                    None => annotations,
                };
                let windowing = self.windowing(events, &path.display().to_string())?;
                let epochs: Vec<EpochSpec> = plan_epochs(source.as_ref(), &windowing)?;
                inputs.push(SessionInput {
                    session: session_name(path),
                    source,
                    epochs,
                    isolated: false,
                });
            }
        }
        let n_epochs: usize = inputs.iter().map(|i| i.epochs.len()).sum();
        let channel_names: Vec<String> = if self.channels.is_empty() || self.epochs.is_some() {
            inputs[0].source.channel_names().to_vec()
        } else {
            self.channels.clone()
        };
        let user_mask = match &self.mask {
            Some(path) => {
                let m = read_mask(path, n_epochs, channel_names.len())?;
                match &m.channels {
                    // A CSV mask is matched to the recording's channels by name,
                    // never by column position.
                    Some(header) => Some(mask_by_name(path, &m.observed, header, &channel_names)?),
                    None => Some(m.observed),
                }
            }
            None => None,
        };
        let opts = ExtractOptions {
            band,
            order: self.order,
            estimator,
            detect: DetectOptions {
                enabled: !self.no_detect,
                rail_fraction: self.rail_fraction,
                flat_ratio: self.flat_ratio,
                amplitude_z: self.amplitude_z,
                broadband_z: self.broadband_z,
                min_correlation: self.min_correlation,
                ..DetectOptions::default()
            },
            channels: (!self.channels.is_empty() && self.epochs.is_none())
                .then(|| self.channels.clone()),
            bad_channels: self.bad.clone(),
            user_mask,
            chunk_seconds: 30.0,
        };
        let sources: Vec<(String, String)> = inputs
            .iter()
            .map(|i| (i.session.clone(), i.source.name()))
            .collect();
        let started = std::time::Instant::now();
        let extraction = extract(inputs, &opts, progress)?;
        let elapsed = started.elapsed().as_secs_f64();
        let set = extraction.trial_set()?;
        // The data's physical unit: --unit, else the EDF/BDF headers' when every
        // channel shares one.
        let unit = self.unit.clone().or_else(|| {
            let first = edf_units.first()?.clone();
            (!first.is_empty() && edf_units.iter().all(|u| *u == first)).then_some(first)
        });
        Ok(ExtractRun {
            extraction,
            set,
            sources,
            options: opts,
            unit,
            warnings,
            notes,
            elapsed_seconds: elapsed,
        })
    }

    /// Every numeric setting in its documented range (the CLI states the
    /// same ranges in `--help`); nothing is silently changed.
    pub fn validate(&self) -> Result<()> {
        const DAY: f64 = 86_400.0;
        use super::{float_in, int_in};
        if let Some(r) = self.rate {
            float_in("rate", r, (1e-3, 1e6))?;
        }
        float_in("offset", self.offset, (-DAY, DAY))?;
        for (name, v) in [
            ("length", self.length),
            ("window", self.window),
            ("step", self.step),
        ] {
            if let Some(v) = v {
                float_in(name, v, (1e-6, DAY))?;
            }
        }
        int_in("order", self.order, (1, 10))?;
        float_in("amplitude_z", self.amplitude_z, (0.5, 100.0))?;
        float_in("broadband_z", self.broadband_z, (0.5, 100.0))?;
        float_in("min_correlation", self.min_correlation, (0.0, 1.0))?;
        float_in("flat_ratio", self.flat_ratio, (0.0, 1.0))?;
        float_in("rail_fraction", self.rail_fraction, (1e-6, 1.0))
    }

    fn windowing(&self, events: Vec<Event>, source: &str) -> Result<Windowing> {
        if let Some(w) = self.window {
            return Ok(Windowing::Fixed {
                length: w,
                step: self.step.unwrap_or(w),
            });
        }
        if events.is_empty() {
            return Err(LacunaError::Unsupported(format!(
                "{source}: no events (no events file and no EDF+/BDF+ annotations); give an events CSV, or use fixed windows"
            )));
        }
        let length = match self.length {
            Some(l) => l,
            None => {
                let d = events[0].duration;
                if d > 0.0 && events.iter().all(|e| e.duration == d) {
                    d
                } else {
                    return Err(LacunaError::InvalidOption(format!(
                        "{source}: events have different or zero durations; give the epoch length"
                    )));
                }
            }
        };
        Ok(Windowing::Events {
            events,
            offset: self.offset,
            length,
            keep: self.labels.clone(),
        })
    }
}

pub fn parse_band(s: &str) -> Result<(f64, f64)> {
    let parts: Vec<&str> = s.split(['-', ',', ':']).collect();
    let bad =
        || LacunaError::InvalidOption(format!("band {s:?}: write it as LOW-HIGH in Hz, e.g. 8-30"));
    if parts.len() != 2 {
        return Err(bad());
    }
    let lo: f64 = parts[0].trim().parse().map_err(|_| bad())?;
    let hi: f64 = parts[1].trim().parse().map_err(|_| bad())?;
    Ok((lo, hi))
}

pub fn session_name(path: &Path) -> String {
    path.file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| path.display().to_string())
}

/// Reorders a CSV mask's columns to `channels` by header name. Unknown,
/// missing or repeated names are refused, naming them.
fn mask_by_name(
    path: &Path,
    observed: &[bool],
    header: &[String],
    channels: &[String],
) -> Result<Vec<bool>> {
    let err = |message: String| LacunaError::Format {
        path: path.to_path_buf(),
        message,
    };
    let p = header.len();
    let mut column = Vec::with_capacity(channels.len());
    for c in channels {
        let hits: Vec<usize> = (0..p).filter(|&k| &header[k] == c).collect();
        match hits.as_slice() {
            [k] => column.push(*k),
            [] => {
                return Err(err(format!(
                    "the mask has no column named '{c}' (its header: {}); name the columns after the recording's channels",
                    header.join(", ")
                )));
            }
            _ => return Err(err(format!("the mask names channel '{c}' more than once"))),
        }
    }
    if let Some(extra) = header.iter().find(|h| !channels.contains(h)) {
        return Err(err(format!(
            "the mask has a column '{extra}' that is not a channel of the recording ({})",
            channels.join(", ")
        )));
    }
    let n = observed.len() / p.max(1);
    Ok((0..n)
        .flat_map(|e| column.iter().map(move |&k| observed[e * p + k]))
        .collect())
}

//! The typed record of an extraction: what `epochs.json` holds, field for
//! field, and the tables written beside it (labels.csv, the mask report).
//! `lacuna report` and `lacuna compare --html` read epochs.json back into
//! [`ExtractionRecord`] for the dropout raster. Layout in docs/formats.md;
//! [`EPOCHS_VERSION`] is bumped when a field changes meaning.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use super::comparison::CAUTION;
use super::extract::ExtractRun;
use crate::ingest::detect::{DetectOptions, Reason};
use crate::report::provenance::Provenance;
use crate::report::tables;

/// Version of the epochs.json layout.
pub const EPOCHS_VERSION: &str = "2";

/// Everything `lacuna extract` records about its epochs. Read back
/// leniently (absent fields take their defaults), so a hand-made or
/// trimmed epochs.json still draws a raster.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct ExtractionRecord {
    pub lacuna_epochs_version: String,
    pub lacuna_version: String,
    pub caution: String,
    pub channels: Vec<String>,
    pub sessions: Vec<SessionSource>,
    pub sampling_rates_hz: Vec<f64>,
    pub band_hz: Option<Vec<f64>>,
    pub filter: Option<String>,
    pub estimator: String,
    /// Samples per window when every window has the same length; later
    /// commands (compare --epochs) take T and the degrees of freedom here.
    pub samples_per_epoch: Option<usize>,
    pub unit: Option<String>,
    pub covariance_unit: Option<String>,
    pub provenance: Option<Provenance>,
    pub detection: DetectOptions,
    pub user_bad_channels: Vec<String>,
    pub user_mask: Option<String>,
    pub set_aside: Vec<String>,
    pub notes: Vec<String>,
    pub summary: ExtractionSummary,
    pub epochs: Vec<EpochEntry>,
    pub masked_per_channel: Vec<ChannelMaskCount>,
    pub cells: usize,
}

/// Which file each session came from.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SessionSource {
    pub session: String,
    pub source: String,
}

/// The counts printed at the end of an extraction (also `--json`).
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct ExtractionSummary {
    pub epochs: usize,
    pub trials: usize,
    pub channels: usize,
    pub masked_cells: usize,
    pub masked_fraction: f64,
    /// Masked cells per reason (reasons with none left out).
    pub reasons: BTreeMap<String, usize>,
    pub empty_epochs: Vec<usize>,
    pub set_aside: Vec<String>,
    pub notes: Vec<String>,
    pub seconds: f64,
}

/// One epoch: where it is, what it became, what it lost and why.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct EpochEntry {
    pub epoch: usize,
    /// Index of the trial it became; None when it lost every channel.
    pub trial: Option<usize>,
    pub session: String,
    pub onset_s: f64,
    pub duration_s: f64,
    pub label: Option<String>,
    pub observed_channels: usize,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub shrinkage: f64,
    pub rank: usize,
    pub masked: Vec<MaskedEntry>,
}

/// One masked channel of an epoch and the rule that masked it.
#[derive(Debug, Clone, Default, Serialize, Deserialize)]
#[serde(default)]
pub struct MaskedEntry {
    pub channel: String,
    pub reason: String,
}

/// Masked cells of one channel over all epochs.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ChannelMaskCount {
    pub channel: String,
    pub masked: usize,
}

impl ExtractRun {
    /// Masked cells per reason, reasons with none left out.
    pub fn reason_counts(&self) -> BTreeMap<String, usize> {
        let mut m = BTreeMap::new();
        for r in Reason::ALL {
            let n = self
                .extraction
                .masked
                .iter()
                .filter(|c| c.reason == r)
                .count();
            if n > 0 {
                m.insert(r.name().to_string(), n);
            }
        }
        m
    }

    /// The counts of this run.
    pub fn summary(&self) -> ExtractionSummary {
        let out = &self.extraction;
        let cells = out.epochs.len() * out.channels.len();
        ExtractionSummary {
            epochs: out.epochs.len(),
            trials: self.set.len(),
            channels: out.channels.len(),
            masked_cells: out.masked.len(),
            masked_fraction: out.masked.len() as f64 / cells.max(1) as f64,
            reasons: self.reason_counts(),
            empty_epochs: out.empty_epochs.clone(),
            set_aside: out.set_aside.clone(),
            notes: out.notes.clone(),
            seconds: self.elapsed_seconds,
        }
    }

    /// Indices of the epochs that became trials, in order.
    fn kept(&self) -> Vec<usize> {
        let out = &self.extraction;
        (0..out.epochs.len())
            .filter(|e| !out.empty_epochs.contains(e))
            .collect()
    }

    /// The record written as epochs.json. `provenance` and `user_mask` (the
    /// path as given) come from whoever read the inputs.
    pub fn record(
        &self,
        provenance: Option<Provenance>,
        user_mask: Option<String>,
    ) -> ExtractionRecord {
        let out = &self.extraction;
        let kept = self.kept();
        let opts = &self.options;
        let epochs = out
            .epochs
            .iter()
            .enumerate()
            .map(|(e, info)| EpochEntry {
                epoch: e,
                trial: kept.iter().position(|&k| k == e),
                session: info.session.clone(),
                onset_s: info.onset,
                duration_s: info.duration,
                label: info.label.clone(),
                observed_channels: info.observed,
                shrinkage: info.shrinkage,
                rank: info.rank,
                masked: out
                    .masked
                    .iter()
                    .filter(|m| m.epoch == e)
                    .map(|m| MaskedEntry {
                        channel: m.channel.clone(),
                        reason: m.reason.name().to_string(),
                    })
                    .collect(),
            })
            .collect();
        let lengths: Vec<usize> = out.epochs.iter().map(|e| e.samples).collect();
        let samples_per_epoch = lengths
            .first()
            .filter(|&&f| lengths.iter().all(|&x| x == f))
            .copied();
        ExtractionRecord {
            lacuna_epochs_version: EPOCHS_VERSION.into(),
            lacuna_version: env!("CARGO_PKG_VERSION").into(),
            caution: CAUTION.into(),
            channels: out.channels.clone(),
            sessions: self
                .sources
                .iter()
                .map(|(s, f)| SessionSource {
                    session: s.clone(),
                    source: f.clone(),
                })
                .collect(),
            sampling_rates_hz: out.sampling_rates.clone(),
            band_hz: opts.band.map(|(l, h)| vec![l, h]),
            filter: opts.band.map(|_| {
                format!(
                    "Butterworth order {} band-pass, forward-backward (zero phase)",
                    opts.order
                )
            }),
            estimator: opts.estimator.name().to_string(),
            samples_per_epoch,
            unit: self.unit.as_deref().map(super::mean::display_unit),
            covariance_unit: super::mean::covariance_unit(self.unit.as_deref()),
            provenance,
            detection: opts.detect.clone(),
            user_bad_channels: opts.bad_channels.clone(),
            user_mask,
            set_aside: out.set_aside.clone(),
            notes: out.notes.clone(),
            summary: self.summary(),
            epochs,
            masked_per_channel: out
                .channels
                .iter()
                .map(|c| ChannelMaskCount {
                    channel: c.clone(),
                    masked: out.masked.iter().filter(|m| &m.channel == c).count(),
                })
                .collect(),
            cells: out.epochs.len() * out.channels.len(),
        }
    }

    /// labels.csv: label and session of every trial.
    pub fn labels_table(&self) -> Vec<u8> {
        let out = &self.extraction;
        tables::table(
            &["label", "session"],
            self.kept().into_iter().map(|e| {
                let info = &out.epochs[e];
                vec![info.label.clone().unwrap_or_default(), info.session.clone()]
            }),
        )
    }

    /// The mask report: one row per masked cell with the statistics behind it.
    pub fn mask_report_table(&self) -> Vec<u8> {
        let out = &self.extraction;
        tables::table(
            &[
                "epoch",
                "session",
                "onset_s",
                "channel",
                "reason",
                "non_finite",
                "rail_fraction",
                "robust_sd",
                "high_band_mad",
                "max_correlation",
            ],
            out.masked.iter().map(|m| {
                let info = &out.epochs[m.epoch];
                vec![
                    m.epoch.to_string(),
                    info.session.clone(),
                    info.onset.to_string(),
                    m.channel.clone(),
                    m.reason.name().to_string(),
                    m.stats.non_finite.to_string(),
                    m.stats.rail_fraction.to_string(),
                    m.stats.robust_sd.to_string(),
                    m.stats
                        .high_band_mad
                        .map_or(String::new(), |v| v.to_string()),
                    m.stats.max_correlation.to_string(),
                ]
            }),
        )
    }
}

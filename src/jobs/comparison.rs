//! The typed result of the comparison job: what `compare.json` holds, field
//! for field. The exporters (JSON, the CSV tables, the HTML page) read this
//! type and nothing else; `lacuna report` reads compare.json back into it.
//! Layout documented in docs/formats.md; [`COMPARE_VERSION`] is bumped when
//! a field changes meaning.

use std::collections::BTreeMap;

use serde::{Deserialize, Serialize};

use crate::diagnose::{ChannelContribution, RankTable};
use crate::report::provenance::Provenance;
use crate::select::{FitCriterion, Recommendation, Score, Target};
use crate::solve::IterRecord;

/// Version of the compare.json layout.
pub const COMPARE_VERSION: &str = "1";

/// The standard caution carried by every result document.
pub const CAUTION: &str =
    "Research software, not a medical device: results inform analysis; they do not diagnose.";

/// Every scheme on one trial set, side by side, with the evidence for
/// choosing one and the per-channel contributions.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Comparison {
    pub compare_version: String,
    pub lacuna_version: String,
    pub caution: String,
    pub trials: usize,
    pub channels: Vec<String>,
    /// Trials observing both channels of each pair (p×p).
    pub coobservation: Vec<Vec<usize>>,
    /// Pairs never observed together, `[a, b]` with `a < b`.
    pub unconstrained_pairs: Vec<[usize; 2]>,
    pub seed: u64,
    /// Wall time of the whole job.
    pub seconds: f64,
    /// Wall time of each stage (schemes, protocols, contributions).
    pub stage_seconds: BTreeMap<String, f64>,
    /// One row per candidate, in the order they ran.
    pub schemes: Vec<SchemeRow>,
    pub distances: DistanceTable,
    pub target: Target,
    pub unit: Option<String>,
    pub covariance_unit: Option<String>,
    /// Where the result came from; filled in by whoever read the inputs.
    pub provenance: Option<Provenance>,
    pub ranks: RankTable,
    pub simulated_dropout: Option<DropoutSection>,
    pub held_out_fit: Option<FitSection>,
    pub decoding: Option<DecodingSection>,
    pub recommendation: Option<Recommendation>,
    pub contributions: Option<Vec<ChannelContribution>>,
}

/// One candidate: its mean and diagnostics, or why it could not run.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(tag = "status")]
pub enum SchemeRow {
    #[serde(rename = "ok")]
    Ok(SchemeMean),
    #[serde(rename = "not applicable")]
    NotApplicable { scheme: String, reason: String },
}

impl SchemeRow {
    /// The candidate's label.
    pub fn scheme(&self) -> &str {
        match self {
            SchemeRow::Ok(m) => &m.scheme,
            SchemeRow::NotApplicable { scheme, .. } => scheme,
        }
    }

    /// The mean and its diagnostics, when the candidate ran.
    pub fn ok(&self) -> Option<&SchemeMean> {
        match self {
            SchemeRow::Ok(m) => Some(m),
            SchemeRow::NotApplicable { .. } => None,
        }
    }
}

/// A candidate that ran.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct SchemeMean {
    pub scheme: String,
    pub converged: bool,
    pub iterations: usize,
    pub seconds: f64,
    /// Of the block on the estimated channels (null when infinite).
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub condition_number: f64,
    /// Of the block on the estimated channels (null when not positive definite).
    pub log_det: Option<f64>,
    /// Weighted mean of log det M[o,o] − log det C_i.
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub log_det_gap: f64,
    /// Weighted mean squared distance of the observed blocks to the mean's.
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub dispersion: f64,
    pub estimated_channels: usize,
    pub notes: Vec<String>,
    /// Trials flagged as far from this mean (robust schemes only).
    #[serde(default)]
    pub outliers: Vec<crate::schemes::OutlierTrial>,
    /// Relative path of the mean's NPY file in the output folder.
    pub mean_file: String,
    /// The mean, null outside the estimated channels.
    pub mean: Vec<Vec<Option<f64>>>,
    pub trace: Vec<IterRecord>,
}

impl SchemeMean {
    /// The mean as a dense matrix, NaN outside the estimated channels.
    pub fn mean_matrix(&self) -> crate::spd::Mat {
        let p = self.mean.len();
        crate::spd::Mat::from_fn(p, p, |i, j| {
            self.mean[i].get(j).copied().flatten().unwrap_or(f64::NAN)
        })
    }

    /// File stem of the mean's files (`means/<stem>.npy` and `.csv`).
    pub fn file_stem(&self) -> String {
        file_stem(&self.scheme)
    }
}

/// File stem for a candidate label: brackets of grid points become `_`.
pub fn file_stem(label: &str) -> String {
    label.replace(['(', ')'], "_")
}

/// Affine-invariant distances between the candidates' means (on the
/// channels both estimate); null where either did not run.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DistanceTable {
    pub schemes: Vec<String>,
    pub matrix: Vec<Vec<Option<f64>>>,
}

/// One candidate's spread of scores in one protocol.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ScoreRow {
    pub scheme: String,
    pub median: Option<f64>,
    pub q1: Option<f64>,
    pub q3: Option<f64>,
    pub n: Option<usize>,
    pub partial_channels: Option<usize>,
    pub failures: usize,
    pub failure_reason: Option<String>,
}

impl From<&Score> for ScoreRow {
    fn from(s: &Score) -> Self {
        ScoreRow {
            scheme: s.candidate.clone(),
            median: s.spread.map(|x| x.median),
            q1: s.spread.map(|x| x.q1),
            q3: s.spread.map(|x| x.q3),
            n: s.spread.map(|x| x.n),
            partial_channels: s.partial,
            failures: s.failures,
            failure_reason: s.failure_reason.clone(),
        }
    }
}

fn rows(scores: &[Score]) -> Vec<ScoreRow> {
    scores.iter().map(ScoreRow::from).collect()
}

/// The simulated-dropout protocol (lower is better).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DropoutSection {
    pub channels: Vec<String>,
    pub left_out: Vec<String>,
    pub complete_trials: usize,
    pub trials_per_repeat: usize,
    pub repeats: usize,
    pub scores: Vec<ScoreRow>,
}

impl From<&crate::select::DropoutValidation> for DropoutSection {
    fn from(d: &crate::select::DropoutValidation) -> Self {
        DropoutSection {
            channels: d.channels.clone(),
            left_out: d.left_out.clone(),
            complete_trials: d.complete_trials,
            trials_per_repeat: d.trials_per_repeat,
            repeats: d.repeats,
            scores: rows(&d.scores),
        }
    }
}

/// The held-out fit protocol (lower is better).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct FitSection {
    pub folds: usize,
    pub criterion: FitCriterion,
    pub scores: Vec<ScoreRow>,
    pub other_criterion: FitCriterion,
    pub other_scores: Vec<ScoreRow>,
}

impl From<&crate::select::HeldOutFit> for FitSection {
    fn from(f: &crate::select::HeldOutFit) -> Self {
        FitSection {
            folds: f.folds,
            criterion: f.criterion,
            scores: rows(&f.scores),
            other_criterion: f.other_criterion,
            other_scores: rows(&f.other_scores),
        }
    }
}

/// The decoding check (accuracy, higher is better).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct DecodingSection {
    pub folds: usize,
    pub classes: Vec<String>,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub chance: f64,
    pub scores: Vec<ScoreRow>,
}

impl From<&crate::select::Decoding> for DecodingSection {
    fn from(d: &crate::select::Decoding) -> Self {
        DecodingSection {
            folds: d.folds,
            classes: d.classes.clone(),
            chance: d.chance,
            scores: rows(&d.scores),
        }
    }
}

impl Comparison {
    /// Is the document whole and self-consistent? The page and the tables
    /// index matrices by channel, so every size must agree with the channel
    /// list. Returns what is wrong, in words.
    pub fn check(&self) -> Result<(), String> {
        let p = self.channels.len();
        if p == 0 {
            return Err("channels is empty".into());
        }
        let mut seen = std::collections::BTreeSet::new();
        for n in &self.channels {
            if n.is_empty() || !seen.insert(n) {
                return Err(format!("channel name '{n}' is empty or repeated"));
            }
        }
        if self.trials == 0 {
            return Err("trials is not a positive integer".into());
        }
        square("coobservation", &self.coobservation, p)?;
        for &[a, b] in &self.unconstrained_pairs {
            if !(a < b && b < p) {
                return Err(format!(
                    "unconstrained pair [{a}, {b}] is not [a, b] with a < b < {p}"
                ));
            }
        }
        for s in &self.schemes {
            if let SchemeRow::Ok(m) = s {
                square(&format!("the mean of {}", m.scheme), &m.mean, p)?;
            }
        }
        let k = self.distances.schemes.len();
        if self.distances.matrix.len() != k || self.distances.matrix.iter().any(|r| r.len() != k) {
            return Err(format!("distances.matrix is not {k} × {k}"));
        }
        if let Some(cs) = &self.contributions
            && cs.len() != p
        {
            return Err(format!("contributions lists {} channels for {p}", cs.len()));
        }
        Ok(())
    }
}

fn square<T>(what: &str, m: &[Vec<T>], p: usize) -> Result<(), String> {
    if m.len() != p {
        return Err(format!("{what} has {} rows for {p} channels", m.len()));
    }
    for (i, r) in m.iter().enumerate() {
        if r.len() != p {
            return Err(format!(
                "{what} row {i} has {} entries for {p} channels",
                r.len()
            ));
        }
    }
    Ok(())
}

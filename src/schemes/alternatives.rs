//! The usual alternatives to the masked mean, each answering the same
//! question on the same trial set.
//!
//! - `complete-trials`: the Karcher mean of the trials that observed every
//!   channel (the rest are dropped);
//! - `available-case`: each entry averaged over the trials that observe both
//!   channels — pairwise-complete covariance, which can be indefinite — then
//!   projected to the nearest SPD matrix with an eigenvalue floor (Higham 1988);
//! - `diagonal-loading`: unobserved rows/columns set to zero, then
//!   `C + λ·(trace C / p)·I`, then the Karcher mean;
//! - `shrinkage`: unobserved rows/columns set to zero and their variances to
//!   the trial's mean observed variance, then `(1−α) C + α (trace C / p) I`
//!   (α fixed, or each trial's OAS intensity when the sample count is known),
//!   then the Karcher mean.
//!
//! Every note says what was dropped, clipped or filled.

use super::{AveragingScheme, Diagnostics, Karcher, MeanResult, SchemeOptions};
use crate::error::{LacunaError, Result};
use crate::spd::Mat;
use crate::spd::nearest::nearest_spd;
use crate::trials::{Trial, TrialSet};

/// Karcher mean of the complete trials only.
pub struct CompleteTrials;
/// Pairwise (available-case) Euclidean mean, projected to SPD.
pub struct AvailableCase;
/// Zero-fill, diagonal loading, Karcher mean.
pub struct DiagonalLoading;
/// Fill, shrink towards a scaled identity, Karcher mean.
pub struct Shrinkage;

/// Runs the Karcher mean on full matrices and relabels the result.
fn karcher_of(
    set: &TrialSet,
    mats: Vec<Mat>,
    weights: Vec<f64>,
    name: &str,
    options: &SchemeOptions,
    mut notes: Vec<String>,
) -> Result<MeanResult> {
    let full = TrialSet::from_full(set.channels().to_vec(), mats, Some(weights))?;
    let mut r = Karcher.average(&full, options)?;
    r.scheme = name.to_string();
    notes.append(&mut r.diagnostics.notes);
    r.diagnostics.notes = notes;
    Ok(r)
}

/// `p×p` matrix with the trial's block at its observed rows/columns, zero elsewhere.
fn zero_filled(t: &Trial, p: usize) -> Mat {
    let mut m = Mat::zeros(p, p);
    for (a, &ca) in t.observed.iter().enumerate() {
        for (b, &cb) in t.observed.iter().enumerate() {
            m[(ca, cb)] = t.block[(a, b)];
        }
    }
    m
}

impl AveragingScheme for CompleteTrials {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::CompleteTrials
    }
    fn summary(&self) -> &'static str {
        "Karcher mean of the trials that observed every channel; incomplete trials are dropped"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let keep: Vec<usize> = (0..set.len())
            .filter(|&i| set.is_complete(i) && set.weights()[i] > 0.0)
            .collect();
        if keep.is_empty() {
            return Err(LacunaError::Unsupported(format!(
                "scheme '{}' needs at least one complete trial with positive weight; none of the {} trials is complete",
                self.name(),
                set.len()
            )));
        }
        let mats = keep
            .iter()
            .map(|&i| set.trials()[i].block.clone())
            .collect();
        let w = keep.iter().map(|&i| set.weights()[i]).collect();
        let note = format!("used {} complete trials of {}", keep.len(), set.len());
        karcher_of(set, mats, w, self.name(), options, vec![note])
    }
}

impl AveragingScheme for AvailableCase {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::AvailableCase
    }
    /// Accepts rank-deficient blocks: a Euclidean average of observed entries.
    fn accepts_rank_deficient(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "entry-wise weighted average over trials observing both channels, projected to SPD"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, _: &SchemeOptions) -> Result<MeanResult> {
        let counts = set.coobservation_counts();
        let p = set.n_channels();
        if let Some(c) = (0..p).find(|&c| counts[c][c] == 0) {
            return Err(LacunaError::NeverObserved {
                channel: set.channels()[c].clone(),
                count: 1,
            });
        }
        let raw = pairwise_mean(set);
        let floor = 1e-6 * raw.trace() / p as f64;
        let proj = nearest_spd(&raw, floor);
        let mut notes = vec![format!(
            "pairwise-complete average; pairs never co-observed set to 0 ({} pair(s))",
            crate::diagnose::identifiability(set)
                .unconstrained_pairs
                .len()
        )];
        if proj.clipped > 0 {
            notes.push(format!(
                "the pairwise average was not positive definite (smallest eigenvalue {:.3e}); {} eigenvalue(s) raised to {floor:.3e}, Frobenius change {:.3e} (Higham 1988 projection)",
                proj.min_eigenvalue, proj.clipped, proj.frobenius_change
            ));
        }
        Ok(MeanResult {
            scheme: self.name().into(),
            mean: proj.matrix,
            diagnostics: Diagnostics::closed_form(notes),
        })
    }
}

/// Entry-wise weighted mean over trials observing both channels (0 where none do).
pub fn pairwise_mean(set: &TrialSet) -> Mat {
    let p = set.n_channels();
    let w = set.normalized_weights();
    let mut sum = Mat::zeros(p, p);
    let mut cnt = Mat::zeros(p, p);
    for (t, &wi) in set.trials().iter().zip(&w) {
        for (a, &ca) in t.observed.iter().enumerate() {
            for (b, &cb) in t.observed.iter().enumerate() {
                sum[(ca, cb)] += wi * t.block[(a, b)];
                cnt[(ca, cb)] += wi;
            }
        }
    }
    Mat::from_fn(p, p, |a, b| {
        if cnt[(a, b)] > 0.0 {
            sum[(a, b)] / cnt[(a, b)]
        } else {
            0.0
        }
    })
}

impl AveragingScheme for DiagonalLoading {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::DiagonalLoading
    }
    /// Accepts rank-deficient blocks: every block is loaded before averaging.
    fn accepts_rank_deficient(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "zero-fill unobserved channels, add λ·(trace/p)·I to every trial, Karcher mean"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn check(&self, options: &SchemeOptions) -> Result<()> {
        options.stop.check()?;
        crate::error::float_in("loading", options.loading, super::LOADING_RANGE)
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let lambda = options.loading;
        let p = set.n_channels();
        let mats = set
            .trials()
            .iter()
            .map(|t| {
                let mut m = zero_filled(t, p);
                let load = lambda * m.trace() / p as f64;
                for c in 0..p {
                    m[(c, c)] += load;
                }
                m
            })
            .collect();
        let filled = set.mask().iter().filter(|&&o| !o).count();
        let note = format!(
            "{filled} unobserved trial-channel cells set to 0, then every trial loaded with λ = {lambda} × trace/p"
        );
        karcher_of(
            set,
            mats,
            set.weights().to_vec(),
            self.name(),
            options,
            vec![note],
        )
    }
}

impl AveragingScheme for Shrinkage {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::Shrinkage
    }
    /// Accepts rank-deficient blocks: every block is shrunk before averaging.
    fn accepts_rank_deficient(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "fill unobserved channels (zero covariance, mean variance), shrink towards (trace/p)·I by α, Karcher mean"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn check(&self, options: &SchemeOptions) -> Result<()> {
        options.stop.check()?;
        crate::error::float_in("shrinkage", options.shrinkage, super::SHRINKAGE_RANGE)
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let alpha = options.shrinkage;
        let p = set.n_channels();
        let mut intensities = Vec::with_capacity(set.len());
        let mats = set
            .trials()
            .iter()
            .map(|t| {
                let alpha = match options.samples {
                    Some(n) => crate::ingest::covariance::oas_intensity(&t.block, n),
                    None => alpha,
                };
                intensities.push(alpha);
                let mut m = zero_filled(t, p);
                let mean_var = t.block.trace() / t.observed.len() as f64;
                for c in 0..p {
                    if t.observed.binary_search(&c).is_err() {
                        m[(c, c)] = mean_var;
                    }
                }
                let target = m.trace() / p as f64;
                let mut s = m * (1.0 - alpha);
                for c in 0..p {
                    s[(c, c)] += alpha * target;
                }
                s
            })
            .collect();
        let note = match options.samples {
            None => format!(
                "unobserved channels filled with zero covariance and the trial's mean observed variance; every trial shrunk with α = {alpha} towards (trace/p)·I"
            ),
            Some(n) => format!(
                "unobserved channels filled with zero covariance and the trial's mean observed variance; each trial shrunk towards (trace/p)·I with its OAS intensity for {n} samples (median {:.3})",
                {
                    let mut v = intensities.clone();
                    crate::ingest::detect::quantile_in_place(&mut v, 0.5)
                }
            ),
        };
        karcher_of(
            set,
            mats,
            set.weights().to_vec(),
            self.name(),
            options,
            vec![note],
        )
    }
}

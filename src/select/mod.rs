//! Choosing a scheme with evidence.
//!
//! Three protocols, each run on every candidate (a scheme with its options):
//! - [`simulated_dropout`]: the complete trials (on the largest channel set
//!   with enough of them) give a reference Karcher mean; the data's own
//!   dropout patterns are imposed on them again and again, every candidate
//!   averages the damaged set, and we measure its affine-invariant distance
//!   to the reference;
//! - [`held_out_fit`]: K-fold over trials; each held-out trial's observed
//!   block is compared with the training mean's matching sub-block
//!   (squared affine-invariant distance);
//! - [`decoding`]: when labels exist, cross-validated minimum distance to
//!   mean classification (Barachant, Bonnet, Congedo & Jutten 2012, IEEE
//!   Trans. Biomed. Eng.) with distances on each trial's observed block.
//!
//! [`recommend`] turns the three into a recommendation with reasons, or an
//! honest "no clear winner" when the interquartile ranges overlap.
//! Everything is deterministic for a given seed, whatever the thread count.

use serde::{Deserialize, Serialize};

use crate::schemes::{AveragingScheme, MeanResult, SchemeId, SchemeOptions, all_schemes};
use crate::simulate::rng::Rng;
use crate::spd::Mat;
use crate::spd::distance::airm_distance;
use crate::trials::{Trial, TrialSet};

mod candidates;
mod decoding;
mod dropout;
mod held_out;
mod recommend;

pub use candidates::*;
pub use decoding::*;
pub use dropout::*;
pub use held_out::*;
pub use recommend::*;

/// Trial sets whose blocks take more than this run a protocol's units
/// (candidates, repeats, folds, leave-one-out and bootstrap re-solves) one
/// at a time, each solve parallel over trials inside; smaller sets run two
/// units side by side. Side by side, every unit holds its own copy of (part
/// of) the trials: at N = 1 000, p = 64 (32.8 MB of blocks) the heap above
/// the trial set peaked at 83 MB side by side and 42 MB one at a time, in
/// the same total time (162 s both); on the demo (0.4 MB) one at a time was
/// 36 % slower, and 18 % at N = 2 000, p = 16 (2 MB) — there the units are
/// small and a solve's own parallel loops do not fill both cores.
pub const SIDE_BY_SIDE_BYTES: usize = 16 << 20;

/// Whether a protocol's units on `set` run side by side
/// ([`SIDE_BY_SIDE_BYTES`]).
pub fn side_by_side(set: &TrialSet) -> bool {
    set.block_bytes() < SIDE_BY_SIDE_BYTES
}

/// `f` on units `0..n`, results in unit order: side by side when
/// `side_by_side`, else one at a time. The results are the same either way.
pub fn map_units<R: Send>(
    n: usize,
    side_by_side: bool,
    f: impl Fn(usize) -> R + Sync + Send,
) -> Vec<R> {
    use rayon::prelude::*;
    if side_by_side {
        (0..n).into_par_iter().map(f).collect()
    } else {
        (0..n).map(f).collect()
    }
}

/// Median and interquartile range of a sample.
#[derive(Debug, Clone, Copy, Serialize, Deserialize)]
pub struct Spread {
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub median: f64,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub q1: f64,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub q3: f64,
    pub n: usize,
}

impl Spread {
    /// A spread of no values (NaN everywhere), for display fallbacks.
    pub const EMPTY: Spread = Spread {
        median: f64::NAN,
        q1: f64::NAN,
        q3: f64::NAN,
        n: 0,
    };

    pub fn of(values: &[f64]) -> Option<Spread> {
        let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
        if v.is_empty() {
            return None;
        }
        let q = |v: &mut Vec<f64>, p: f64| crate::ingest::detect::quantile_in_place(v, p);
        Some(Spread {
            median: q(&mut v, 0.5),
            q1: q(&mut v, 0.25),
            q3: q(&mut v, 0.75),
            n: v.len(),
        })
    }
}

/// One candidate's result in one protocol.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Score {
    pub candidate: String,
    /// None when the candidate could not run (see `failures`).
    pub spread: Option<Spread>,
    /// Channels it estimates, when not all (distances then use those only).
    pub partial: Option<usize>,
    /// Runs that failed, with the first reason.
    pub failures: usize,
    pub failure_reason: Option<String>,
}

/// What the mean is meant to estimate; it decides the protocols' references.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Target {
    /// The Riemannian centre of the trials (minimum-distance decoding,
    /// re-centring): a common scale factor is harmless. References: the
    /// complete-data Karcher mean; held-out fit by squared affine-invariant
    /// distance.
    #[default]
    Centre,
    /// The population covariance (spatial filters, whitening, source models,
    /// power compared across window lengths). References: the arithmetic mean
    /// of complete trials (unbiased for the population covariance); held-out
    /// fit by Gaussian likelihood.
    Population,
}

impl Target {
    /// Name used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Target::Centre => "centre",
            Target::Population => "population",
        }
    }
}

/// How the held-out protocol scores a held-out trial's observed block `C`
/// against the training mean's sub-block `M` (both `k×k`); lower is better.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FitCriterion {
    /// `δ²(M, C)`, the squared affine-invariant distance (needs `C` full rank).
    AffineDistance,
    /// Negative Gaussian log-likelihood per channel,
    /// `(1/k) [log det M + tr(M⁻¹ C)]` up to a constant: defined for
    /// rank-deficient `C`, minimised in expectation by `M = E[C]`.
    Likelihood,
}

/// Called after each repeat or fold of a protocol (progress display).
pub type StepObserver = std::sync::Arc<dyn Fn() + Send + Sync>;

/// Options of the protocols.
#[derive(Clone)]
pub struct SelectOptions {
    pub repeats: usize,
    pub folds: usize,
    pub seed: u64,
    /// Complete trials wanted before giving up channels for the reference.
    pub min_complete: usize,
    /// Most trials used per simulated-dropout repeat.
    pub max_trials: usize,
    /// Most training trials per fold of the held-out fit and, split evenly
    /// over the classes, of the decoding check (a seeded random subset
    /// beyond that: the scores barely change, the cost does).
    pub max_train: usize,
    /// Called after every repeat or fold.
    pub on_step: Option<StepObserver>,
    /// What the mean should estimate (decides the references).
    pub target: Target,
    /// How the held-out protocol scores a trial.
    pub criterion: FitCriterion,
}

impl std::fmt::Debug for SelectOptions {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SelectOptions")
            .field("repeats", &self.repeats)
            .field("folds", &self.folds)
            .field("seed", &self.seed)
            .field("min_complete", &self.min_complete)
            .field("max_trials", &self.max_trials)
            .field("max_train", &self.max_train)
            .field("target", &self.target)
            .field("criterion", &self.criterion)
            .finish()
    }
}

impl SelectOptions {
    fn step(&self) {
        if let Some(f) = &self.on_step {
            f();
        }
    }
}

impl Default for SelectOptions {
    fn default() -> Self {
        SelectOptions {
            repeats: 20,
            folds: 5,
            seed: 0,
            min_complete: 20,
            max_trials: 200,
            max_train: 600,
            on_step: None,
            target: Target::Centre,
            criterion: FitCriterion::AffineDistance,
        }
    }
}

/// Picks the largest channel set on which at least `min` trials are complete:
/// greedily drops the channel missing from most trials until enough trials
/// observe every remaining channel.
pub fn reference_channels(set: &TrialSet, min: usize) -> Vec<usize> {
    let p = set.n_channels();
    let mut keep: Vec<usize> = (0..p).collect();
    let need = min.min(set.len());
    loop {
        let complete = (0..set.len())
            .filter(|&i| keep.iter().all(|&c| set.observed(i, c)))
            .count();
        if complete >= need || keep.len() <= 2 {
            return keep;
        }
        // Drop the channel whose absence blocks most trials.
        let (pos, _) = keep
            .iter()
            .enumerate()
            .map(|(k, &c)| (k, (0..set.len()).filter(|&i| !set.observed(i, c)).count()))
            .max_by_key(|&(k, missing)| (missing, std::cmp::Reverse(k)))
            .expect("non-empty");
        keep.remove(pos);
    }
}

fn distance_on(a: &Mat, b: &Mat, channels: &[usize]) -> f64 {
    let pick = |m: &Mat| {
        Mat::from_fn(channels.len(), channels.len(), |i, j| {
            m[(channels[i], channels[j])]
        })
    };
    airm_distance(&pick(a), &pick(b))
}

/// A trial's observed block and the mean's sub-block on the same channels
/// (those the trial observed and the mean estimates), or None when they
/// share no channel. Every comparison of a mean with a trial goes through it.
pub fn matching_blocks(
    mean: &Mat,
    estimated: Option<&[usize]>,
    trial: &Trial,
) -> Option<(Mat, Mat)> {
    let o: Vec<usize> = match estimated {
        Some(e) => trial
            .observed
            .iter()
            .copied()
            .filter(|c| e.contains(c))
            .collect(),
        None => trial.observed.clone(),
    };
    if o.is_empty() {
        return None;
    }
    let pos: Vec<usize> = o
        .iter()
        .map(|c| {
            trial
                .observed
                .binary_search(c)
                .expect("subset of the observed channels")
        })
        .collect();
    Some((
        crate::spd::sub_block(mean, &o),
        crate::spd::sub_block(&trial.block, &pos),
    ))
}

/// One run of one candidate: its value and how many channels it estimated
/// (None = all), or why it failed.
pub(crate) type RunOutcome = std::result::Result<(f64, Option<usize>), String>;

fn score_of(label: &str, runs: impl Iterator<Item = RunOutcome>) -> Score {
    let mut values = Vec::new();
    let mut partial = None;
    let mut failures = 0;
    let mut reason = None;
    for r in runs {
        match r {
            Ok((d, p)) => {
                values.push(d);
                partial = partial.or(p);
            }
            Err(e) => {
                failures += 1;
                reason.get_or_insert(e);
            }
        }
    }
    Score {
        candidate: label.to_string(),
        spread: Spread::of(&values),
        partial,
        failures,
        failure_reason: reason,
    }
}

/// Keeps a seeded random subset of at most `cap` of `v`, in increasing order.
pub(crate) fn seeded_subset(v: &mut Vec<usize>, cap: usize, seed: u64) {
    if v.len() <= cap {
        return;
    }
    let mut rng = Rng::new(seed);
    for i in (1..v.len()).rev() {
        v.swap(i, rng.below(i + 1));
    }
    v.truncate(cap);
    v.sort_unstable();
}

/// Trial indices of each fold: `k` folds of `0..n` (seeded shuffle, then
/// every k-th index), each sorted.
pub fn folds(n: usize, k: usize, seed: u64) -> Vec<Vec<usize>> {
    let mut rng = Rng::new(seed);
    let mut idx: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        idx.swap(i, rng.below(i + 1));
    }
    let k = k.clamp(2, n.max(2));
    (0..k)
        .map(|f| {
            let mut v: Vec<usize> = idx.iter().copied().skip(f).step_by(k).collect();
            v.sort_unstable();
            v
        })
        .collect()
}

/// Small trial sets for the protocols' unit tests.
#[cfg(test)]
pub(crate) mod testing {
    use crate::schemes::SchemeId;
    use crate::simulate::rng::Rng;
    use crate::spd::Mat;
    use crate::trials::{Trial, TrialSet};

    /// `n` trials of `p` channels: Wishart-like draws (T = 4p samples)
    /// around `scale_a`·I for label "a" and around diag(1, 2, …, p)·`scale_b`
    /// for "b" (alternating), or exactly the identity when `exact`. Every
    /// third trial loses one channel (in turn).
    pub fn set(n: usize, p: usize, seed: u64, exact: bool) -> TrialSet {
        let mut rng = Rng::new(seed);
        let t = 4 * p;
        let mut trials = Vec::new();
        let mut labels = Vec::new();
        for i in 0..n {
            let class_b = i % 2 == 1;
            let full = if exact {
                Mat::identity(p, p)
            } else {
                let scale: Vec<f64> = (0..p)
                    .map(|c| if class_b { 3.0 * (c + 1) as f64 } else { 1.0 })
                    .collect();
                let x = Mat::from_fn(p, t, |r, _| scale[r].sqrt() * rng.normal());
                &x * x.transpose() / t as f64
            };
            let observed: Vec<usize> = if i % 3 == 0 {
                (0..p).filter(|&c| c != i % p).collect()
            } else {
                (0..p).collect()
            };
            trials.push(Trial {
                block: crate::spd::sub_block(&full, &observed),
                observed,
            });
            labels.push(if class_b { "b" } else { "a" }.to_string());
        }
        let names = crate::trials::default_channel_names(p);
        let mut set = TrialSet::new(names, trials, None, "test").unwrap();
        set.labels = Some(labels);
        set
    }

    /// The masked mean and complete-trials as candidates.
    pub fn candidates() -> Vec<super::Candidate> {
        let base = crate::SchemeOptions::default();
        super::default_candidates(
            &base,
            &[
                SchemeId::AirmObserved.name().to_string(),
                SchemeId::CompleteTrials.name().to_string(),
            ],
            &super::LOADING_GRID,
        )
    }
}

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

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::error::Result;
use crate::schemes::{AveragingScheme, MeanResult, SchemeId, SchemeOptions, all_schemes};
use crate::simulate::rng::Rng;
use crate::spd::Mat;
use crate::spd::distance::airm_distance;
use crate::trials::{Trial, TrialSet};

/// One contestant: a scheme and the options it runs with.
pub struct Candidate {
    /// Name in tables (scheme name, with its parameter when there are variants).
    pub label: String,
    /// Which scheme it runs.
    pub id: SchemeId,
    pub scheme: Box<dyn AveragingScheme>,
    pub options: SchemeOptions,
}

impl Candidate {
    /// Runs the candidate on a trial set.
    pub fn run(&self, set: &TrialSet) -> Result<MeanResult> {
        let mut r = self.scheme.average(set, &self.options)?;
        r.scheme = self.label.clone();
        Ok(r)
    }

    /// Runs it inside a validation protocol: iterative schemes stop at a
    /// relative gradient norm of max(tol, 1e-5). The protocols compare
    /// distances of order 1e-2 to 1 whose spread across repeats is of order
    /// 1e-3; the looser stop changes them by about 1e-5 and saves iterations.
    fn run_loose(&self, set: &TrialSet) -> Result<MeanResult> {
        let mut options = self.options.clone();
        options.stop.tol = options.stop.tol.max(1e-5);
        let mut r = self.scheme.average(set, &options)?;
        r.scheme = self.label.clone();
        Ok(r)
    }
}

/// Diagonal-loading strengths compared by default.
pub const LOADING_GRID: [f64; 4] = [1e-4, 1e-3, 1e-2, 1e-1];

/// Every scheme that accepts missing channels, diagonal loading once per λ
/// of [`LOADING_GRID`]. `only` restricts to the given labels or scheme names.
pub fn default_candidates(base: &SchemeOptions, only: &[String]) -> Vec<Candidate> {
    let mut out = Vec::new();
    for s in all_schemes() {
        if !s.handles_missing() {
            continue;
        }
        let id = s.id();
        // Each scheme stops at its own iteration cap (EM takes many cheap steps).
        let stop = crate::solve::StopRule {
            tol: base.stop.tol,
            max_iter: id.default_max_iter(),
        };
        if id == SchemeId::DiagonalLoading {
            for &l in &LOADING_GRID {
                let label = format!("diagonal-loading({l:e})");
                if only.is_empty() || only.iter().any(|o| o == &label || o == s.name()) {
                    out.push(Candidate {
                        label,
                        id,
                        scheme: id.scheme(),
                        options: SchemeOptions {
                            loading: l,
                            observer: None,
                            stop: stop.clone(),
                            ..base.clone()
                        },
                    });
                }
            }
            continue;
        }
        if only.is_empty() || only.iter().any(|o| o == s.name()) {
            out.push(Candidate {
                label: s.name().to_string(),
                id,
                scheme: s,
                options: SchemeOptions {
                    observer: None,
                    stop,
                    ..base.clone()
                },
            });
        }
    }
    out
}

/// Loading strengths and shrinkage intensities of the regularise-then-average
/// grid (relative to each block's mean variance).
pub const REGULARIZE_LOADING: [f64; 3] = [1e-3, 1e-2, 1e-1];
pub const REGULARIZE_SHRINKAGE: [f64; 3] = [0.02, 0.1, 0.3];

/// The masked mean after each regulariser of the grid (plus OAS when the
/// samples per window are known): the candidates for rank-deficient data.
pub fn regularized_candidates(base: &SchemeOptions) -> Vec<Candidate> {
    use crate::schemes::regularize::Regularizer;
    let mut grid: Vec<Regularizer> = REGULARIZE_LOADING
        .iter()
        .map(|&lambda| Regularizer::Loading { lambda })
        .chain(
            REGULARIZE_SHRINKAGE
                .iter()
                .map(|&alpha| Regularizer::Shrinkage { alpha }),
        )
        .collect();
    if let Some(samples) = base.samples.filter(|&t| t >= 2) {
        grid.push(Regularizer::Oas { samples });
    }
    grid.into_iter()
        .map(|r| Candidate {
            label: format!("airm-observed+{}", r.label()),
            id: SchemeId::AirmObserved,
            scheme: SchemeId::AirmObserved.scheme(),
            options: SchemeOptions {
                regularize: Some(r),
                observer: None,
                ..base.clone()
            },
        })
        .collect()
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

/// Result of [`simulated_dropout`].
#[derive(Debug, Clone, Serialize)]
pub struct DropoutValidation {
    /// Channels the protocol ran on (names).
    pub channels: Vec<String>,
    /// Channels left out for lack of complete trials with them.
    pub left_out: Vec<String>,
    pub complete_trials: usize,
    /// Trials per repeat (a random subset when there are many).
    pub trials_per_repeat: usize,
    pub repeats: usize,
    /// The reference's target (centre: Karcher mean; population: arithmetic mean).
    pub target: Target,
    /// Lower is better: distance to the complete-data reference.
    pub scores: Vec<Score>,
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

/// Simulated dropout validation (see the module documentation).
pub fn simulated_dropout(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<DropoutValidation> {
    let s = reference_channels(set, opts.min_complete);
    let complete: Vec<usize> = (0..set.len())
        .filter(|&i| s.iter().all(|&c| set.observed(i, c)))
        .collect();
    let names: Vec<String> = s.iter().map(|&c| set.channels()[c].clone()).collect();
    let drop: Vec<usize> = (0..set.n_channels()).filter(|c| !s.contains(c)).collect();
    let base = set.select_trials(&complete)?.without_channels(&drop)?;
    let reference = match opts.target {
        Target::Centre => crate::schemes::Karcher.average(&base, &SchemeOptions::default())?,
        Target::Population => {
            crate::schemes::Arithmetic.average(&base, &SchemeOptions::default())?
        }
    }
    .mean;
    if crate::spd::kernels::cholesky(&reference).is_none() {
        return Err(crate::error::LacunaError::RankDeficient {
            scheme: "the simulated-dropout reference".into(),
            trial: base.rank_deficient().first().copied().unwrap_or(0),
            rank: 0,
            size: s.len(),
            count: base.rank_deficient().len(),
        });
    }
    // The data's own patterns, restricted to the reference channels.
    let patterns: Vec<Vec<usize>> = (0..set.len())
        .map(|i| {
            (0..s.len())
                .filter(|&k| set.observed(i, s[k]))
                .collect::<Vec<usize>>()
        })
        .filter(|o| o.len() >= 2)
        .collect();
    let per_repeat = complete.len().min(opts.max_trials);
    let runs: Vec<Vec<RunOutcome>> = (0..opts.repeats)
        .into_par_iter()
        .map(|r| {
            let mut rng =
                Rng::new(opts.seed ^ (0x9E37_79B9_7F4A_7C15u64.wrapping_mul(r as u64 + 1)));
            // A random subset of the complete trials, each given a random pattern.
            let mut idx: Vec<usize> = (0..base.len()).collect();
            for i in (1..idx.len()).rev() {
                idx.swap(i, rng.below(i + 1));
            }
            idx.truncate(per_repeat);
            idx.sort_unstable();
            let trials: Vec<Trial> = idx
                .iter()
                .map(|&i| {
                    let t = &base.trials()[i];
                    let o = if patterns.is_empty() {
                        t.observed.clone()
                    } else {
                        patterns[rng.below(patterns.len())].clone()
                    };
                    Trial {
                        block: crate::spd::sub_block(&t.block, &o),
                        observed: o,
                    }
                })
                .collect();
            let weights = idx.iter().map(|&i| base.weights()[i]).collect();
            let damaged =
                match TrialSet::new(names.clone(), trials, Some(weights), "simulated dropout") {
                    Ok(d) => d,
                    Err(e) => return vec![Err(e.to_string()); candidates.len()],
                };
            candidates
                .iter()
                .map(|c| {
                    let m = c.run_loose(&damaged).map_err(|e| e.to_string())?;
                    let est = m.diagnostics.estimated_channels.clone();
                    let ch: Vec<usize> = est.clone().unwrap_or_else(|| (0..s.len()).collect());
                    Ok((distance_on(&m.mean, &reference, &ch), est.map(|e| e.len())))
                })
                .collect()
        })
        .inspect(|_| opts.step())
        .collect();
    let scores = candidates
        .iter()
        .enumerate()
        .map(|(k, c)| score_of(&c.label, runs.iter().map(|r| r[k].clone())))
        .collect();
    Ok(DropoutValidation {
        left_out: drop.iter().map(|&c| set.channels()[c].clone()).collect(),
        channels: names,
        complete_trials: complete.len(),
        trials_per_repeat: per_repeat,
        repeats: opts.repeats,
        target: opts.target,
        scores,
    })
}

/// One run of one candidate: its value and how many channels it estimated
/// (None = all), or why it failed.
type RunOutcome = std::result::Result<(f64, Option<usize>), String>;

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
fn seeded_subset(v: &mut Vec<usize>, cap: usize, seed: u64) {
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

/// Trial indices of each fold (shuffled with the seed).
fn folds(n: usize, k: usize, seed: u64) -> Vec<Vec<usize>> {
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

/// Result of [`held_out_fit`]: squared distances of held-out observed blocks
/// to the training mean's sub-blocks (lower is better).
#[derive(Debug, Clone, Serialize)]
pub struct HeldOutFit {
    pub folds: usize,
    /// How each held-out trial was scored.
    pub criterion: FitCriterion,
    /// The other criterion, scored on the same folds (to say when the two
    /// targets would rank differently). Non-finite values (distances to a
    /// rank-deficient block) are left out.
    pub other_criterion: FitCriterion,
    pub other_scores: Vec<Score>,
    pub scores: Vec<Score>,
}

impl FitCriterion {
    /// The criterion of the other target.
    pub fn other(self) -> Self {
        match self {
            FitCriterion::AffineDistance => FitCriterion::Likelihood,
            FitCriterion::Likelihood => FitCriterion::AffineDistance,
        }
    }

    /// In words, for reasons and reports.
    pub fn describe(self) -> &'static str {
        match self {
            FitCriterion::AffineDistance => "median squared affine-invariant distance",
            FitCriterion::Likelihood => {
                "median negative Gaussian log-likelihood per channel, (log det M + tr M⁻¹C)/k"
            }
        }
    }
}

/// One held-out trial's score under `criterion` (lower is better): mean
/// sub-block `m`, trial block `c`.
pub fn fit_score(criterion: FitCriterion, m: &Mat, c: &Mat) -> f64 {
    match criterion {
        FitCriterion::AffineDistance => {
            let d = airm_distance(m, c);
            d * d
        }
        FitCriterion::Likelihood => {
            let k = m.nrows() as f64;
            let Some(l) = crate::spd::kernels::cholesky(m) else {
                return f64::INFINITY;
            };
            let log_det: f64 = 2.0 * (0..m.nrows()).map(|a| l[(a, a)].ln()).sum::<f64>();
            // tr(M⁻¹ C) = ‖L⁻¹ C L⁻ᵀ‖ trace = trace of the whitened block.
            let trace = crate::spd::kernels::whiten(&l, c).trace();
            (log_det + trace) / k
        }
    }
}

/// K-fold held-out fit (see the module documentation).
pub fn held_out_fit(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<HeldOutFit> {
    let fs = folds(set.len(), opts.folds, opts.seed ^ 0xF01D);
    type FoldOutcome = std::result::Result<(Option<usize>, Vec<(f64, f64)>), String>;
    let per_fold: Vec<Vec<FoldOutcome>> = fs
        .par_iter()
        .enumerate()
        .map(|(f, test)| {
            let mut train: Vec<usize> = (0..set.len())
                .filter(|i| test.binary_search(i).is_err())
                .collect();
            seeded_subset(&mut train, opts.max_train, opts.seed ^ 0x7EA1 ^ f as u64);
            let Ok(tr) = set.select_trials(&train) else {
                return vec![Err("empty training set".into()); candidates.len()];
            };
            candidates
                .iter()
                .map(|c| {
                    let m = c.run_loose(&tr).map_err(|e| e.to_string())?;
                    let est = m.diagnostics.estimated_channels.clone();
                    Ok((
                        est.as_ref().map(Vec::len),
                        test.iter()
                            .filter_map(|&i| {
                                let (a, b) =
                                    matching_blocks(&m.mean, est.as_deref(), &set.trials()[i])?;
                                Some((
                                    fit_score(opts.criterion, &a, &b),
                                    fit_score(opts.criterion.other(), &a, &b),
                                ))
                            })
                            .collect::<Vec<(f64, f64)>>(),
                    ))
                })
                .collect()
        })
        .inspect(|_| opts.step())
        .collect();
    let score_with = |pick: fn(&(f64, f64)) -> f64| -> Vec<Score> {
        candidates
            .iter()
            .enumerate()
            .map(|(k, c)| {
                let mut values = Vec::new();
                let mut failures = 0;
                let mut reason = None;
                let mut partial = None;
                for f in &per_fold {
                    match &f[k] {
                        Ok((est, v)) => {
                            values.extend(v.iter().map(pick).filter(|x| x.is_finite()));
                            partial = partial.or(*est);
                        }
                        Err(e) => {
                            failures += 1;
                            reason.get_or_insert(e.clone());
                        }
                    }
                }
                Score {
                    candidate: c.label.clone(),
                    spread: Spread::of(&values),
                    partial,
                    failures,
                    failure_reason: reason,
                }
            })
            .collect()
    };
    let scores = score_with(|v| v.0);
    let other_scores = score_with(|v| v.1);
    Ok(HeldOutFit {
        folds: fs.len(),
        criterion: opts.criterion,
        other_criterion: opts.criterion.other(),
        other_scores,
        scores,
    })
}

/// Result of [`decoding`]: accuracy per fold (higher is better).
#[derive(Debug, Clone, Serialize)]
pub struct Decoding {
    pub folds: usize,
    pub classes: Vec<String>,
    /// Accuracy of always answering the most frequent class.
    pub chance: f64,
    pub scores: Vec<Score>,
}

/// Cross-validated minimum-distance-to-mean classification, or None when the
/// labels do not allow it (fewer than two classes with two trials each).
pub fn decoding(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<Option<Decoding>> {
    let Some(labels) = &set.labels else {
        return Ok(None);
    };
    let mut classes: Vec<String> = labels.iter().filter(|l| !l.is_empty()).cloned().collect();
    classes.sort();
    classes.dedup();
    let count = |c: &String| labels.iter().filter(|l| *l == c).count();
    if classes.len() < 2 || classes.iter().any(|c| count(c) < 2) {
        return Ok(None);
    }
    let chance = classes.iter().map(count).max().unwrap_or(0) as f64 / labels.len() as f64;
    let fs = folds(set.len(), opts.folds, opts.seed ^ 0xDEC0);
    let per_fold: Vec<Vec<std::result::Result<f64, String>>> = fs
        .par_iter()
        .map(|test| {
            candidates
                .iter()
                .map(|c| {
                    let mut means = Vec::new();
                    for (k, class) in classes.iter().enumerate() {
                        let mut train: Vec<usize> = (0..set.len())
                            .filter(|i| test.binary_search(i).is_err() && &labels[*i] == class)
                            .collect();
                        let cap = (opts.max_train / classes.len()).max(2);
                        seeded_subset(
                            &mut train,
                            cap,
                            opts.seed ^ 0xC1A5 ^ ((k as u64) << 8) ^ test[0] as u64,
                        );
                        let tr = set.select_trials(&train).map_err(|e| e.to_string())?;
                        let m = c.run_loose(&tr).map_err(|e| e.to_string())?;
                        means.push(m);
                    }
                    let mut right = 0;
                    for &i in test {
                        let t = &set.trials()[i];
                        let mut best = (f64::INFINITY, 0);
                        for (k, m) in means.iter().enumerate() {
                            let Some((a, b)) = matching_blocks(
                                &m.mean,
                                m.diagnostics.estimated_channels.as_deref(),
                                t,
                            ) else {
                                continue;
                            };
                            let d = airm_distance(&a, &b);
                            if d < best.0 {
                                best = (d, k);
                            }
                        }
                        right += usize::from(classes[best.1] == labels[i]);
                    }
                    Ok(right as f64 / test.len().max(1) as f64)
                })
                .collect()
        })
        .inspect(|_| opts.step())
        .collect();
    let scores = candidates
        .iter()
        .enumerate()
        .map(|(k, c)| {
            score_of(
                &c.label,
                per_fold.iter().map(|f| f[k].clone().map(|a| (a, None))),
            )
        })
        .collect();
    Ok(Some(Decoding {
        folds: fs.len(),
        classes,
        chance,
        scores,
    }))
}

/// The recommendation and its reasons, in plain words.
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct Recommendation {
    /// The recommended candidate (the best on the primary protocol), if any ran.
    pub scheme: Option<String>,
    /// What the recommendation aims at.
    pub target: Target,
    /// The protocol that ranked: "simulated-dropout" or "held-out-fit".
    pub primary: String,
    /// False when other candidates' interquartile ranges overlap its own.
    pub clear: bool,
    /// Candidates statistically tied with it (IQR overlap), itself first.
    pub tied: Vec<String>,
    pub reasons: Vec<String>,
}

fn ranked(scores: &[Score], lower_is_better: bool) -> Vec<&Score> {
    let mut v: Vec<&Score> = scores
        .iter()
        .filter(|s| s.spread.is_some() && s.partial.is_none() && s.failures == 0)
        .collect();
    v.sort_by(|a, b| {
        let (x, y) = (median_of(a), median_of(b));
        if lower_is_better {
            x.total_cmp(&y)
        } else {
            y.total_cmp(&x)
        }
    });
    v
}

/// The median of a ranked score (ranked scores always have a spread).
fn median_of(s: &Score) -> f64 {
    s.spread.map_or(f64::NAN, |x| x.median)
}

/// Candidates whose interquartile range reaches the best one's (ties).
fn ties(order: &[&Score]) -> Vec<String> {
    // Protocol runs stop at a relative gradient norm of 1e-5, so scores
    // closer than TIE are solver precision, not evidence.
    const TIE: f64 = 1e-4;
    let Some(b) = order.first().and_then(|s| s.spread) else {
        return Vec::new();
    };
    order
        .iter()
        .filter(|s| s.spread.is_some_and(|x| x.q1 <= b.q3 + TIE))
        .map(|s| s.candidate.clone())
        .collect()
}

/// For schemes tied on the primary protocol: what each other protocol says
/// about them — ties them too, narrows them, or separates one.
fn tie_evidence(
    tied: &[String],
    primary: &str,
    fit: Option<&HeldOutFit>,
    dec: Option<&Decoding>,
) -> Vec<String> {
    let mut out = Vec::new();
    let mut others: Vec<(&str, &[Score], bool)> = Vec::new();
    if primary != "held-out-fit"
        && let Some(f) = fit
    {
        others.push(("Held-out fit", &f.scores, true));
    }
    if let Some(d) = dec {
        others.push(("Decoding", &d.scores, false));
    }
    for (name, scores, lower_is_better) in others {
        let among: Vec<&Score> = ranked(scores, lower_is_better)
            .into_iter()
            .filter(|s| tied.contains(&s.candidate))
            .collect();
        if among.len() < 2 {
            continue;
        }
        let still = if lower_is_better {
            ties(&among)
        } else {
            // Higher is better: mirror the interval test.
            let b = among[0].spread.unwrap_or(Spread::EMPTY);
            among
                .iter()
                .filter(|s| s.spread.is_some_and(|x| x.q3 >= b.q1 - 1e-4))
                .map(|s| s.candidate.clone())
                .collect()
        };
        out.push(if still.len() == among.len() {
            format!(
                "{name} ties them too (interquartile ranges overlap): the evidence does not separate {}.",
                still.join(", ")
            )
        } else if still.len() == 1 {
            format!(
                "{name} separates them: {} is best among the tied schemes (median {:.4}) and its interquartile range is clear of the others'.",
                still[0],
                median_of(among[0])
            )
        } else {
            format!(
                "{name} narrows the tie to {} (the others' ranges are clear of the best).",
                still.join(", ")
            )
        });
    }
    out
}

fn failures_and_partials(scores: &[Score], channels: usize, reasons: &mut Vec<String>) {
    let partial: Vec<String> = scores
        .iter()
        .filter(|s| s.partial.is_some())
        .map(|s| {
            format!(
                "{} ({} of {channels} channels)",
                s.candidate,
                s.partial.unwrap_or(0)
            )
        })
        .collect();
    if !partial.is_empty() {
        reasons.push(format!(
            "Not ranked because they estimate only some channels: {}.",
            partial.join(", ")
        ));
    }
    let needs_rank = |s: &&Score| {
        s.failure_reason
            .as_deref()
            .is_some_and(|r| r.contains("needs full-rank"))
    };
    let full_rank_only: Vec<&str> = scores
        .iter()
        .filter(|s| s.failures > 0)
        .filter(needs_rank)
        .map(|s| s.candidate.as_str())
        .collect();
    if !full_rank_only.is_empty() {
        reasons.push(format!(
            "Not run because they need full-rank trials: {} (the airm-observed+… candidates are the masked mean after a regulariser).",
            full_rank_only.join(", ")
        ));
    }
    let failed: Vec<String> = scores
        .iter()
        .filter(|s| s.failures > 0 && !needs_rank(s))
        .map(|s| {
            format!(
                "{} ({})",
                s.candidate,
                s.failure_reason.clone().unwrap_or_default()
            )
        })
        .collect();
    if !failed.is_empty() {
        reasons.push(format!("Could not run: {}.", failed.join("; ")));
    }
}

/// Combines the protocols into a recommendation for `target`. The primary
/// protocol is simulated dropout when it ran, otherwise the held-out fit
/// (rank-deficient data, where no complete-data reference exists).
pub fn recommend(
    dropout: Option<&DropoutValidation>,
    fit: Option<&HeldOutFit>,
    dec: Option<&Decoding>,
    target: Target,
    channels: usize,
) -> Recommendation {
    let mut reasons = Vec::new();
    let (primary, order, all) = match (dropout, fit) {
        (Some(d), _) if !ranked(&d.scores, true).is_empty() => {
            ("simulated-dropout", ranked(&d.scores, true), &d.scores)
        }
        (_, Some(f)) if !ranked(&f.scores, true).is_empty() => {
            ("held-out-fit", ranked(&f.scores, true), &f.scores)
        }
        _ => {
            return Recommendation {
                scheme: None,
                target,
                primary: "none".into(),
                clear: false,
                tied: vec![],
                reasons: vec!["no candidate completed every repeat or fold of a protocol".into()],
            };
        }
    };
    let best = order[0];
    let b = best.spread.unwrap_or(Spread::EMPTY);
    let tied = ties(&order);
    let clear = tied.len() == 1;
    reasons.push(match target {
        Target::Centre => "Target: the Riemannian centre of the trials (minimum-distance decoding, re-centring; a common scale factor does not matter). Use --target population for spatial filters, whitening or power compared across studies.".to_string(),
        Target::Population => "Target: the population covariance (spatial filters, whitening, source models, power compared across window lengths). References are unbiased for it: the arithmetic mean of complete trials, and the Gaussian likelihood of held-out trials.".to_string(),
    });
    match (primary, dropout) {
        ("simulated-dropout", Some(d)) => reasons.push(format!(
            "Simulated dropout ({} repeats, {} of {} complete trials each, on {} channels): {} came closest to the complete-data {} (median affine-invariant distance {:.4}, interquartile range {:.4}–{:.4}).",
            d.repeats,
            d.trials_per_repeat,
            d.complete_trials,
            d.channels.len(),
            best.candidate,
            match d.target {
                Target::Centre => "Karcher mean",
                Target::Population => "arithmetic mean (pooled sample covariance)",
            },
            b.median,
            b.q1,
            b.q3
        )),
        _ => {
            let f = fit.map_or(0, |f| f.folds);
            reasons.push(format!(
                "Held-out fit ({f}-fold; {}): {} fitted the held-out trials best (median {:.4}, interquartile range {:.4}–{:.4}).",
                fit.map_or("", |f| f.criterion.describe()),
                best.candidate,
                b.median,
                b.q1,
                b.q3
            ));
            if best.candidate == "gaussian-em"
                && fit.is_some_and(|f| f.criterion == FitCriterion::Likelihood)
            {
                reasons.push("The likelihood criterion is the one gaussian-em maximises on the training trials, so it favours that scheme slightly; a regularised masked mean within its interquartile range is as good a fit.".into());
            }
            if dropout.is_none() {
                reasons.push("Simulated dropout and decoding need full-rank trials (their references and distances are undefined for singular blocks), so the held-out likelihood ranks alone. A regulariser adds bias (each block is pulled towards a multiple of the identity) and removes variance and the singularity; the held-out likelihood weighs the two on trials the mean never saw.".into());
            }
        }
    }
    if let Some(second) = order.get(1) {
        let s = second.spread.unwrap_or(Spread::EMPTY);
        reasons.push(if clear {
            format!(
                "The runner-up, {}, had median {:.4} ({:.4}–{:.4}); the ranges do not overlap.",
                second.candidate, s.median, s.q1, s.q3
            )
        } else {
            format!(
                "No clear winner: the interquartile ranges of {} overlap (runner-up {} at median {:.4}, {:.4}–{:.4}).",
                tied.join(", "),
                second.candidate,
                s.median,
                s.q1,
                s.q3
            )
        });
    }
    if !clear {
        reasons.extend(tie_evidence(&tied, primary, fit, dec));
    }
    if let Some(d) = dropout
        && !d.left_out.is_empty()
    {
        reasons.push(format!(
            "Left out of the simulated dropout for lack of trials observing them together with the rest: {}. That ranking says nothing about them.",
            d.left_out.join(", ")
        ));
    }
    failures_and_partials(all, channels, &mut reasons);
    if primary == "simulated-dropout" && target == Target::Centre {
        reasons.push("The reference is a Riemannian (Karcher) mean, which favours schemes that average in the same geometry; the held-out fit and decoding checks below do not share that bias.".into());
    }
    if let Some(fit) = fit
        && primary == "simulated-dropout"
    {
        let o = ranked(&fit.scores, true);
        if let Some(f) = o.first() {
            let pos = o.iter().position(|s| s.candidate == best.candidate);
            reasons.push(format!(
                "Held-out fit ({}-fold, {}): best {} ({:.4}); {} ranks {}.",
                fit.folds,
                fit.criterion.describe(),
                f.candidate,
                median_of(f),
                best.candidate,
                pos.map_or("—".into(), |p| format!("{} of {}", p + 1, o.len()))
            ));
        }
    }
    let criterion_matches_target = fit.is_some_and(|f| {
        matches!(
            (target, f.criterion),
            (Target::Centre, FitCriterion::AffineDistance)
                | (Target::Population, FitCriterion::Likelihood)
        )
    });
    if let Some(fit) = fit.filter(|_| criterion_matches_target && dropout.is_some()) {
        // Would the other target's held-out criterion pick another scheme?
        let mine = ranked(&fit.scores, true);
        let other = ranked(&fit.other_scores, true);
        if let (Some(a), Some(o)) = (mine.first(), other.first())
            && a.candidate != o.candidate
        {
            let other_target = match target {
                Target::Centre => "population",
                Target::Population => "centre",
            };
            reasons.push(format!(
                "The two targets rank differently: on the same held-out folds, the {} ({}) puts {} first, where this target's criterion puts {} first. If you need the {other_target}, run with --target {other_target}.",
                fit.other_criterion.describe(),
                other_target,
                o.candidate,
                a.candidate
            ));
        }
    }
    if let Some(dec) = dec {
        let o = ranked(&dec.scores, false);
        if let Some(top) = o.first() {
            let t = top.spread.unwrap_or(Spread::EMPTY);
            let mine = dec
                .scores
                .iter()
                .find(|s| s.candidate == best.candidate)
                .and_then(|s| s.spread);
            reasons.push(format!(
                "Decoding (minimum distance to mean, {}-fold, chance {:.2}): best {} with median fold accuracy {:.2}{}.",
                dec.folds,
                dec.chance,
                top.candidate,
                t.median,
                mine.map_or(String::new(), |m| format!("; {} {:.2}", best.candidate, m.median))
            ));
            if let Some(m) = mine
                && top.candidate != best.candidate
                && t.q1 > m.q3
            {
                reasons.push(format!(
                    "Decoding clearly favours {}: if classification is the goal, prefer it.",
                    top.candidate
                ));
            }
        }
    }
    Recommendation {
        scheme: Some(best.candidate.clone()),
        target,
        primary: primary.into(),
        clear,
        tied,
        reasons,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn score(name: &str, median: f64, q1: f64, q3: f64) -> Score {
        Score {
            candidate: name.into(),
            spread: Some(Spread {
                median,
                q1,
                q3,
                n: 5,
            }),
            partial: None,
            failures: 0,
            failure_reason: None,
        }
    }

    fn dropout(scores: Vec<Score>) -> DropoutValidation {
        DropoutValidation {
            channels: vec!["a".into(), "b".into()],
            left_out: vec![],
            complete_trials: 40,
            trials_per_repeat: 40,
            repeats: 5,
            target: Target::Centre,
            scores,
        }
    }

    fn decoding(scores: Vec<Score>) -> Decoding {
        Decoding {
            folds: 5,
            classes: vec!["x".into(), "y".into()],
            chance: 0.5,
            scores,
        }
    }

    // Overlapping interquartile ranges are a tie (common practice, no source);
    // the reasons must say what the other protocols make of the tied schemes.
    #[test]
    fn a_tie_names_the_evidence_that_separates_or_ties() {
        let d = dropout(vec![
            score("p", 0.10, 0.08, 0.12),
            score("q", 0.11, 0.09, 0.13),
            score("r", 0.50, 0.45, 0.55),
        ]);
        // Decoding separates p and q (q clearly higher accuracy).
        let sep = decoding(vec![
            score("p", 0.70, 0.65, 0.72),
            score("q", 0.90, 0.85, 0.95),
            score("r", 0.95, 0.90, 1.0),
        ]);
        let r = recommend(Some(&d), None, Some(&sep), Target::Centre, 2);
        assert!(!r.clear);
        assert_eq!(r.tied, vec!["p".to_string(), "q".to_string()]);
        assert!(
            r.reasons
                .iter()
                .any(|s| s.starts_with("Decoding separates them: q is best")),
            "{:?}",
            r.reasons
        );
        // Decoding ties them as well.
        let tie = decoding(vec![
            score("p", 0.80, 0.75, 0.85),
            score("q", 0.82, 0.78, 0.86),
        ]);
        let r = recommend(Some(&d), None, Some(&tie), Target::Centre, 2);
        assert!(
            r.reasons
                .iter()
                .any(|s| s.starts_with("Decoding ties them too") && s.contains("separate q, p.")),
            "{:?}",
            r.reasons
        );
        // A clear winner gets no tie sentence.
        let clear = dropout(vec![
            score("p", 0.10, 0.08, 0.12),
            score("q", 0.30, 0.25, 0.35),
        ]);
        let r = recommend(Some(&clear), None, Some(&tie), Target::Centre, 2);
        assert!(r.clear);
        assert!(
            !r.reasons
                .iter()
                .any(|s| s.contains("ties them") || s.contains("separates them"))
        );
    }
}

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
use serde::Serialize;

use crate::error::Result;
use crate::schemes::{AveragingScheme, MeanResult, SchemeOptions, all_schemes};
use crate::simulate::rng::Rng;
use crate::spd::Mat;
use crate::spd::distance::airm_distance;
use crate::trials::{Trial, TrialSet};

/// One contestant: a scheme and the options it runs with.
pub struct Candidate {
    /// Name in tables (scheme name, with its parameter when there are variants).
    pub label: String,
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
        if s.name() == "diagonal-loading" {
            for &l in &LOADING_GRID {
                let label = format!("diagonal-loading({l:e})");
                if only.is_empty() || only.iter().any(|o| o == &label || o == s.name()) {
                    out.push(Candidate {
                        label,
                        scheme: crate::scheme_by_name(s.name()).expect("listed scheme"),
                        options: SchemeOptions {
                            loading: l,
                            observer: None,
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
                scheme: s,
                options: SchemeOptions {
                    observer: None,
                    ..base.clone()
                },
            });
        }
    }
    out
}

/// Median and interquartile range of a sample.
#[derive(Debug, Clone, Copy, Serialize)]
pub struct Spread {
    pub median: f64,
    pub q1: f64,
    pub q3: f64,
    pub n: usize,
}

impl Spread {
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
#[derive(Debug, Clone, Serialize)]
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
    /// Lower is better: distance to the complete-data reference.
    pub scores: Vec<Score>,
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

fn block(m: &Mat, o: &[usize]) -> Mat {
    Mat::from_fn(o.len(), o.len(), |a, b| m[(o[a], o[b])])
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
    Some((block(mean, &o), block(&trial.block, &pos)))
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
    let reference = crate::schemes::Karcher
        .average(&base, &SchemeOptions::default())?
        .mean;
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
                        block: block(&t.block, &o),
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
    pub scores: Vec<Score>,
}

/// K-fold held-out fit (see the module documentation).
pub fn held_out_fit(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<HeldOutFit> {
    let fs = folds(set.len(), opts.folds, opts.seed ^ 0xF01D);
    type FoldOutcome = std::result::Result<(Option<usize>, Vec<f64>), String>;
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
                                let d = airm_distance(&a, &b);
                                Some(d * d)
                            })
                            .collect::<Vec<f64>>(),
                    ))
                })
                .collect()
        })
        .inspect(|_| opts.step())
        .collect();
    let scores = candidates
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
                        values.extend_from_slice(v);
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
        .collect();
    Ok(HeldOutFit {
        folds: fs.len(),
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
#[derive(Debug, Clone, Serialize)]
pub struct Recommendation {
    /// The recommended candidate (the best on simulated dropout), if any ran.
    pub scheme: Option<String>,
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
        let (x, y) = (
            a.spread.expect("ranked").median,
            b.spread.expect("ranked").median,
        );
        if lower_is_better {
            x.total_cmp(&y)
        } else {
            y.total_cmp(&x)
        }
    });
    v
}

/// Combines the protocols into a recommendation.
pub fn recommend(
    dropout: &DropoutValidation,
    fit: Option<&HeldOutFit>,
    dec: Option<&Decoding>,
) -> Recommendation {
    let order = ranked(&dropout.scores, true);
    let mut reasons = Vec::new();
    let Some(best) = order.first() else {
        return Recommendation {
            scheme: None,
            clear: false,
            tied: vec![],
            reasons: vec!["no candidate completed every simulated-dropout repeat".into()],
        };
    };
    let b = best.spread.expect("ranked");
    // Protocol runs stop at a relative gradient norm of 1e-5, so distances
    // closer than TIE are solver precision, not evidence.
    const TIE: f64 = 1e-4;
    let tied: Vec<String> = order
        .iter()
        .filter(|s| s.spread.expect("ranked").q1 <= b.q3 + TIE)
        .map(|s| s.candidate.clone())
        .collect();
    let clear = tied.len() == 1;
    reasons.push(format!(
        "Simulated dropout ({} repeats, {} of {} complete trials each, on {} channels): {} came closest to the complete-data Karcher mean (median affine-invariant distance {:.4}, interquartile range {:.4}–{:.4}).",
        dropout.repeats,
        dropout.trials_per_repeat,
        dropout.complete_trials,
        dropout.channels.len(),
        best.candidate,
        b.median,
        b.q1,
        b.q3
    ));
    if let Some(second) = order.get(1) {
        let s = second.spread.expect("ranked");
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
    if !dropout.left_out.is_empty() {
        reasons.push(format!(
            "Left out of this validation for lack of trials observing them together with the rest: {}. The ranking says nothing about them.",
            dropout.left_out.join(", ")
        ));
    }
    let partial: Vec<String> = dropout
        .scores
        .iter()
        .filter(|s| s.partial.is_some())
        .map(|s| {
            format!(
                "{} ({} of {} channels)",
                s.candidate,
                s.partial.unwrap_or(0),
                dropout.channels.len()
            )
        })
        .collect();
    if !partial.is_empty() {
        reasons.push(format!(
            "Not ranked because they estimate only some channels: {}.",
            partial.join(", ")
        ));
    }
    let failed: Vec<String> = dropout
        .scores
        .iter()
        .filter(|s| s.failures > 0)
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
    reasons.push("The reference is a Riemannian (Karcher) mean, which favours schemes that average in the same geometry; the held-out fit and decoding checks below do not share that bias.".into());
    if let Some(fit) = fit {
        let o = ranked(&fit.scores, true);
        if let Some(f) = o.first() {
            let pos = o.iter().position(|s| s.candidate == best.candidate);
            reasons.push(format!(
                "Held-out fit ({}-fold): best {} (median squared distance {:.4}); {} ranks {}.",
                fit.folds,
                f.candidate,
                f.spread.expect("ranked").median,
                best.candidate,
                pos.map_or("—".into(), |p| format!("{} of {}", p + 1, o.len()))
            ));
        }
    }
    if let Some(dec) = dec {
        let o = ranked(&dec.scores, false);
        if let Some(top) = o.first() {
            let t = top.spread.expect("ranked");
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
        clear,
        tied,
        reasons,
    }
}

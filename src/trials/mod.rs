//! The trial set: per-trial covariance blocks over the observed channels.
//!
//! A trial keeps only its observed channels and the matching `k×k` block of
//! its covariance. Unobserved rows and columns are never stored, so no scheme
//! can read them by accident: a scheme that needs full matrices must ask for
//! them and gets an error naming the first incomplete trial.
//!
//! Validation runs once, in [`TrialSet::new`]; everything downstream trusts
//! the set: blocks are finite, symmetric (symmetrised) and positive
//! semidefinite, every trial observes at least one channel, and weights are
//! usable. Each block's numerical rank is recorded ([`TrialSet::rank`]):
//! rank-deficient windows (average reference, removed components, windows
//! shorter than the channel count) are data, not errors; the schemes that
//! need full rank say so ([`crate::schemes::AveragingScheme::accepts_rank_deficient`]).

pub mod io;
pub mod merge;
pub mod npy;
pub mod shards;

use crate::error::{LacunaError, ProblemKind, Result, TrialProblem};
use crate::spd::Mat;
use crate::spd::validate::{SpdDefect, check_spd};

/// One trial (or time window): the channels it observed and their covariance.
#[derive(Debug, Clone, PartialEq)]
pub struct Trial {
    /// Indices of observed channels, strictly increasing.
    pub observed: Vec<usize>,
    /// Covariance of the observed channels, `k×k` with `k = observed.len()`.
    pub block: Mat,
}

impl Trial {
    /// The same trial in another channel numbering: channel `c` becomes
    /// `at[c]`; the observed list is sorted again and the block permuted to match.
    pub fn remapped(&self, at: &[usize]) -> Trial {
        let mut order: Vec<(usize, usize)> = self
            .observed
            .iter()
            .enumerate()
            .map(|(r, &c)| (at[c], r))
            .collect();
        order.sort_unstable();
        Trial {
            observed: order.iter().map(|&(c, _)| c).collect(),
            block: Mat::from_fn(order.len(), order.len(), |a, b| {
                self.block[(order[a].1, order[b].1)]
            }),
        }
    }

    /// Takes trial `i` from a C-order `(N, p, p)` stack and its mask row.
    pub fn from_stack_row(stack: &[f64], p: usize, i: usize, observed: Vec<usize>) -> Trial {
        let base = i * p * p;
        let k = observed.len();
        let block = Mat::from_fn(k, k, |a, b| stack[base + observed[a] * p + observed[b]]);
        Trial { observed, block }
    }
}

/// A validated set of trials over a common list of channels.
#[derive(Debug, Clone)]
pub struct TrialSet {
    channels: Vec<String>,
    trials: Vec<Trial>,
    weights: Vec<f64>,
    /// Optional class label per trial.
    pub labels: Option<Vec<String>>,
    /// Optional session id per trial.
    pub sessions: Option<Vec<String>>,
    /// Numerical rank of each trial's observed block.
    ranks: Vec<usize>,
}

/// Largest magnitude accepted in a block: products of two entries stay finite.
pub const MAX_ENTRY: f64 = 1e150;

/// The rank rule: eigenvalues above `k · ε · λ_max` count (numpy's
/// `matrix_rank` default; k the block size). A block whose smallest
/// eigenvalue is below `−100 ×` that tolerance is indefinite beyond rounding.
pub fn rank_tolerance(k: usize, lambda_max: f64) -> f64 {
    k as f64 * f64::EPSILON * lambda_max
}

/// Numerical rank of a symmetric positive semidefinite block, or the most
/// negative eigenvalue when it is indefinite beyond rounding, or `None` when
/// the block is zero.
fn psd_rank(block: &Mat) -> std::result::Result<usize, f64> {
    let ev = crate::spd::kernels::sym_eigenvalues(block);
    let (lo, hi) = (ev[0], ev[ev.len() - 1]);
    let tol = rank_tolerance(block.nrows(), hi.max(0.0));
    if lo < -100.0 * tol || !(hi > 0.0) {
        return Err(lo);
    }
    Ok(ev.iter().filter(|&&v| v > tol).count())
}

/// Trials sharing one observation pattern.
#[derive(Debug, Clone)]
pub struct PatternGroup {
    /// The observed channels of every trial in the group.
    pub observed: Vec<usize>,
    /// Trial indices, increasing.
    pub trials: Vec<usize>,
}

impl TrialSet {
    /// Validates and builds a trial set. `source_name` names the input in
    /// error messages (usually the file path). Every problem is reported,
    /// not just the first.
    pub fn new(
        channels: Vec<String>,
        trials: Vec<Trial>,
        weights: Option<Vec<f64>>,
        source_name: &str,
    ) -> Result<Self> {
        Self::build(channels, trials, weights, source_name, None)
    }

    /// A set made from an already validated set's trials (a selection, or
    /// principal sub-blocks of full-rank blocks) whose ranks are known: the
    /// blocks need no new check (no Cholesky factor, no eigenvalues per
    /// trial — half an evaluation of the masked cost, paid by every fold
    /// and re-solve before); names, emptiness and weights are checked as
    /// for any set.
    fn derived(
        channels: Vec<String>,
        trials: Vec<Trial>,
        weights: Vec<f64>,
        ranks: Vec<usize>,
        source_name: &str,
    ) -> Result<Self> {
        Self::build(channels, trials, Some(weights), source_name, Some(ranks))
    }

    fn build(
        channels: Vec<String>,
        mut trials: Vec<Trial>,
        weights: Option<Vec<f64>>,
        source_name: &str,
        known_ranks: Option<Vec<usize>>,
    ) -> Result<Self> {
        let p = channels.len();
        let mut problems = Vec::new();
        let name = |c: usize| channels.get(c).cloned().unwrap_or_else(|| format!("#{c}"));
        if trials.is_empty() {
            problems.push(TrialProblem {
                kind: ProblemKind::Other,
                trial: None,
                channel: None,
                message: "the set holds no trials".into(),
            });
        }
        // Names must identify channels: no empty and no repeated names.
        let mut seen = std::collections::BTreeMap::new();
        for (c, n) in channels.iter().enumerate() {
            if n.trim().is_empty() {
                problems.push(TrialProblem {
                    kind: ProblemKind::Other,
                    trial: None,
                    channel: Some(format!("#{c}")),
                    message: "channel name is empty; give every channel a name".into(),
                });
            } else if let Some(first) = seen.insert(n.as_str(), c) {
                problems.push(TrialProblem {
                    kind: ProblemKind::Other,
                    trial: None,
                    channel: Some(n.clone()),
                    message: format!(
                        "channel name repeated (columns {first} and {c}); names must be unique"
                    ),
                });
            }
        }
        let ranks = match known_ranks {
            Some(r) => r,
            None => {
                let mut ranks = vec![0; trials.len()];
                for (i, t) in trials.iter_mut().enumerate() {
                    if t.observed.is_empty() {
                        problems.push(TrialProblem {
                            kind: ProblemKind::Other,
                            trial: Some(i),
                            channel: None,
                            message: "no channel is observed".into(),
                        });
                        continue;
                    }
                    if t.observed.windows(2).any(|w| w[0] >= w[1])
                        || t.observed.iter().any(|&c| c >= p)
                    {
                        problems.push(TrialProblem {
                            kind: ProblemKind::Other,
                            trial: Some(i),
                            channel: None,
                            message: "observed channel list is not increasing or out of range"
                                .into(),
                        });
                        continue;
                    }
                    let k = t.observed.len();
                    // Magnitudes whose products overflow cannot be computed with;
                    // say so instead of blaming rank or finiteness.
                    if let Some(idx) = t
                        .block
                        .iter()
                        .position(|v| v.is_finite() && v.abs() > MAX_ENTRY)
                    {
                        let (r, c) = (idx % k, idx / k);
                        problems.push(TrialProblem {
                        kind: ProblemKind::Other,
                            trial: Some(i),
                            channel: Some(name(t.observed[r])),
                            message: format!(
                                "value {:e} (with channel {}) is beyond the magnitude lacuna computes with (|x| ≤ 1e150); rescale the data (e.g. to µV² or V²)",
                                t.block[(r, c)],
                                name(t.observed[c])
                            ),
                        });
                        continue;
                    }
                    match check_spd(&t.block) {
                        Ok(()) => {
                            // Cholesky succeeds on some exactly singular blocks (the
                            // last pivot is rounding); the rank is decided below from
                            // the eigenvalues.
                            t.block = crate::spd::symmetrize(&t.block);
                            ranks[i] = k;
                        }
                        Err(SpdDefect::NotPositiveDefinite { row, .. }) => {
                            let sym = crate::spd::symmetrize(&t.block);
                            match psd_rank(&sym) {
                                Ok(r) => {
                                    t.block = sym;
                                    ranks[i] = r;
                                }
                                Err(lo) => problems.push(TrialProblem {
                                    kind: if lo < 0.0 {
                                        ProblemKind::Indefinite
                                    } else {
                                        ProblemKind::Other
                                    },
                                    trial: Some(i),
                                    channel: Some(name(t.observed[row])),
                                    message: if lo.is_nan() || lo >= 0.0 {
                                        "every observed channel has zero variance (no signal): mark them unobserved in the mask".to_string()
                                    } else {
                                        format!(
                                            "observed block is indefinite beyond rounding: eigenvalue {lo:.3e} (the first failing Cholesky pivot is at this channel; observed channels: {}); a covariance is never indefinite — check how it was computed",
                                            t.observed.iter().map(|&c| name(c)).collect::<Vec<_>>().join(", ")
                                        )
                                    },
                                }),
                            }
                        }
                        Err(SpdDefect::NonFinite { row, col }) => problems.push(TrialProblem {
                            kind: ProblemKind::NonFinite,
                            trial: Some(i),
                            channel: Some(name(t.observed[row])),
                            message: format!("NaN or infinite value inside the observed block (with channel {}); mark the channel as unobserved in the mask or fix the value", name(t.observed[col])),
                        }),
                        Err(SpdDefect::NotSymmetric { relative, row }) => problems.push(TrialProblem {
                            kind: ProblemKind::NotSymmetric,
                            trial: Some(i),
                            channel: Some(name(t.observed[row])),
                            message: format!("matrix is not symmetric (relative asymmetry {relative:.2e} > 1e-10); largest mismatch in this channel's row"),
                        }),
                    }
                }
                {
                    use rayon::prelude::*;
                    let found: Vec<usize> = trials
                        .par_iter()
                        .zip(ranks.par_iter())
                        .map(|(t, &r)| {
                            if r == t.observed.len() && r > 0 {
                                psd_rank(&t.block).unwrap_or(r)
                            } else {
                                r
                            }
                        })
                        .collect();
                    ranks = found;
                }
                ranks
            }
        };
        let n = trials.len();
        let weights = match weights {
            None => vec![1.0; n],
            Some(w) => {
                if w.len() != n {
                    problems.push(TrialProblem {
                        kind: ProblemKind::Other,
                        trial: None,
                        channel: None,
                        message: format!("{} weights given for {n} trials", w.len()),
                    });
                } else {
                    for (i, &v) in w.iter().enumerate() {
                        if !v.is_finite() || v < 0.0 {
                            problems.push(TrialProblem {
                                kind: ProblemKind::Other,
                                trial: Some(i),
                                channel: None,
                                message: format!("weight {v} is negative or not finite"),
                            });
                        }
                    }
                    if w.iter().all(|&v| v == 0.0) {
                        problems.push(TrialProblem {
                            kind: ProblemKind::Other,
                            trial: None,
                            channel: None,
                            message: "all weights are zero".into(),
                        });
                    }
                }
                w
            }
        };
        if !problems.is_empty() {
            return Err(LacunaError::InvalidTrials {
                source_name: source_name.to_string(),
                problems,
            });
        }
        Ok(TrialSet {
            channels,
            trials,
            weights,
            labels: None,
            sessions: None,
            ranks,
        })
    }

    /// Bytes the trials' blocks take (`Σ k²·8`).
    pub fn block_bytes(&self) -> usize {
        self.trials
            .iter()
            .map(|t| t.observed.len() * t.observed.len() * 8)
            .sum()
    }

    /// Number of trials `N`.
    pub fn len(&self) -> usize {
        self.trials.len()
    }

    /// True when the set has no trials (never true after validation).
    pub fn is_empty(&self) -> bool {
        self.trials.is_empty()
    }

    /// Number of channels `p`.
    pub fn n_channels(&self) -> usize {
        self.channels.len()
    }

    /// Channel names.
    pub fn channels(&self) -> &[String] {
        &self.channels
    }

    /// The trials.
    pub fn trials(&self) -> &[Trial] {
        &self.trials
    }

    /// Numerical rank of trial `i`'s observed block (see [`rank_tolerance`]).
    pub fn rank(&self, i: usize) -> usize {
        self.ranks[i]
    }

    /// Trials whose observed block is rank-deficient, in order.
    pub fn rank_deficient(&self) -> Vec<usize> {
        (0..self.len())
            .filter(|&i| self.ranks[i] < self.trials[i].observed.len())
            .collect()
    }

    /// Raw weights as given (default 1).
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// The trials, giving up the set.
    pub fn into_trials(self) -> Vec<Trial> {
        self.trials
    }

    /// Sets the weights of a part of a larger set (a shard's chunk): each
    /// finite and non-negative, but all zero is allowed — the whole set's
    /// weights were checked for that.
    pub fn set_part_weights(&mut self, w: Vec<f64>) -> Result<()> {
        if w.len() != self.trials.len() || w.iter().any(|v| !v.is_finite() || *v < 0.0) {
            return Err(LacunaError::InvalidTrials {
                source_name: "part weights".into(),
                problems: vec![TrialProblem {
                    kind: ProblemKind::Other,
                    trial: None,
                    channel: None,
                    message: format!(
                        "{} weights for {} trials, each finite and non-negative",
                        w.len(),
                        self.trials.len()
                    ),
                }],
            });
        }
        self.weights = w;
        Ok(())
    }

    /// Replaces the weights (same rules as [`TrialSet::new`]: one per trial,
    /// finite, non-negative, not all zero); the blocks are untouched.
    pub fn set_weights(&mut self, w: Vec<f64>) -> Result<()> {
        let bad = w.len() != self.trials.len()
            || w.iter().any(|v| !v.is_finite() || *v < 0.0)
            || w.iter().all(|&v| v == 0.0);
        if bad {
            return Err(LacunaError::InvalidTrials {
                source_name: "new weights".into(),
                problems: vec![TrialProblem {
                    kind: ProblemKind::Other,
                    trial: None,
                    channel: None,
                    message: format!(
                        "{} weights for {} trials, each finite and non-negative, not all zero",
                        w.len(),
                        self.trials.len()
                    ),
                }],
            });
        }
        self.weights = w;
        Ok(())
    }

    /// Weights scaled to sum to one.
    pub fn normalized_weights(&self) -> Vec<f64> {
        // Scale by the largest first, so huge weights cannot overflow the sum.
        let top = self.weights.iter().copied().fold(0.0f64, f64::max);
        let scaled: Vec<f64> = self.weights.iter().map(|w| w / top).collect();
        let s: f64 = scaled.iter().sum();
        scaled.iter().map(|w| w / s).collect()
    }

    /// Whether trial `i` observed channel `c`.
    pub fn observed(&self, i: usize, c: usize) -> bool {
        self.trials[i].observed.binary_search(&c).is_ok()
    }

    /// `N×p` mask, row-major, true = observed.
    pub fn mask(&self) -> Vec<bool> {
        let p = self.n_channels();
        let mut m = vec![false; self.len() * p];
        for (i, t) in self.trials.iter().enumerate() {
            for &c in &t.observed {
                m[i * p + c] = true;
            }
        }
        m
    }

    /// True when trial `i` observed every channel.
    pub fn is_complete(&self, i: usize) -> bool {
        self.trials[i].observed.len() == self.n_channels()
    }

    /// True when every trial observed every channel.
    pub fn all_complete(&self) -> bool {
        (0..self.len()).all(|i| self.is_complete(i))
    }

    /// The full `p×p` matrices, for schemes that need complete trials.
    /// Errors with the first incomplete trial and one of its missing channels.
    pub fn complete_blocks(&self, scheme: &str) -> Result<Vec<&Mat>> {
        if let Some(i) = (0..self.len()).find(|&i| !self.is_complete(i)) {
            let missing = (0..self.n_channels())
                .find(|&c| !self.observed(i, c))
                .unwrap_or(0);
            return Err(LacunaError::Unsupported(format!(
                "scheme '{scheme}' needs every channel in every trial, but trial {i} lacks channel {} ({} of {} trials are incomplete); the scheme airm-observed averages the observed blocks only",
                self.channels[missing],
                (0..self.len()).filter(|&j| !self.is_complete(j)).count(),
                self.len()
            )));
        }
        Ok(self.trials.iter().map(|t| &t.block).collect())
    }

    /// Trials grouped by identical observation pattern, in order of first
    /// appearance. Trials in a group share the sub-block of any candidate mean,
    /// so per-pattern work (a Cholesky factor) is done once per group.
    pub fn pattern_groups(&self) -> Vec<PatternGroup> {
        let mut index: std::collections::HashMap<&[usize], usize> =
            std::collections::HashMap::new();
        let mut groups: Vec<PatternGroup> = Vec::new();
        for (i, t) in self.trials.iter().enumerate() {
            match index.get(t.observed.as_slice()) {
                Some(&g) => groups[g].trials.push(i),
                None => {
                    index.insert(t.observed.as_slice(), groups.len());
                    groups.push(PatternGroup {
                        observed: t.observed.clone(),
                        trials: vec![i],
                    });
                }
            }
        }
        groups
    }

    /// `p×p` matrix of how many trials observe both channels (diagonal:
    /// how many observe the channel).
    pub fn coobservation_counts(&self) -> Vec<Vec<usize>> {
        let p = self.n_channels();
        let mut c = vec![vec![0usize; p]; p];
        for t in &self.trials {
            for &a in &t.observed {
                for &b in &t.observed {
                    c[a][b] += 1;
                }
            }
        }
        c
    }

    /// A copy without the listed channels (indices into the current list).
    /// Trials left with no channel make this fail validation.
    pub fn without_channels(&self, drop: &[usize]) -> Result<TrialSet> {
        let p = self.n_channels();
        let keep: Vec<usize> = (0..p).filter(|c| !drop.contains(c)).collect();
        let mut new_index = vec![usize::MAX; p];
        for (k, &c) in keep.iter().enumerate() {
            new_index[c] = k;
        }
        let trials: Vec<Trial> = self
            .trials
            .iter()
            .map(|t| {
                let local: Vec<usize> = (0..t.observed.len())
                    .filter(|&a| new_index[t.observed[a]] != usize::MAX)
                    .collect();
                let observed = local.iter().map(|&a| new_index[t.observed[a]]).collect();
                let block = Mat::from_fn(local.len(), local.len(), |r, s| {
                    t.block[(local[r], local[s])]
                });
                Trial { observed, block }
            })
            .collect();
        let channels = keep.iter().map(|&c| self.channels[c].clone()).collect();
        // A principal sub-block of a full-rank block is full rank under the
        // same rank rule (its eigenvalues interlace: the smallest cannot
        // fall, the largest cannot rise, so it stays above k·ε·λ_max).
        // Otherwise (a rank-deficient block, or nothing left) check afresh.
        let full: Option<Vec<usize>> = trials
            .iter()
            .zip(self.trials.iter().zip(&self.ranks))
            .map(|(new, (old, &r))| {
                (r == old.observed.len() && !new.observed.is_empty()).then_some(new.observed.len())
            })
            .collect();
        let mut out = match full {
            Some(ranks) => TrialSet::derived(
                channels,
                trials,
                self.weights.clone(),
                ranks,
                "after dropping channels",
            )?,
            None => TrialSet::new(
                channels,
                trials,
                Some(self.weights.clone()),
                "after dropping channels",
            )?,
        };
        out.labels = self.labels.clone();
        out.sessions = self.sessions.clone();
        Ok(out)
    }

    /// The trials at `idx` (in that order; repeats allowed, as in a
    /// bootstrap), with their weights, labels and sessions.
    pub fn select_trials(&self, idx: &[usize]) -> Result<TrialSet> {
        let trials = idx.iter().map(|&i| self.trials[i].clone()).collect();
        let weights = idx.iter().map(|&i| self.weights[i]).collect();
        let ranks = idx.iter().map(|&i| self.ranks[i]).collect();
        let mut out = TrialSet::derived(
            self.channels.clone(),
            trials,
            weights,
            ranks,
            "selected trials",
        )?;
        out.labels = self
            .labels
            .as_ref()
            .map(|l| idx.iter().map(|&i| l[i].clone()).collect());
        out.sessions = self
            .sessions
            .as_ref()
            .map(|s| idx.iter().map(|&i| s[i].clone()).collect());
        Ok(out)
    }

    /// The same trials with each block replaced by `f(i, trial)` (same
    /// channels, weights, labels and sessions), validated again.
    pub fn map_blocks(
        &self,
        source_name: &str,
        f: impl Fn(usize, &Trial) -> Mat,
    ) -> Result<TrialSet> {
        let trials = self
            .trials
            .iter()
            .enumerate()
            .map(|(i, t)| Trial {
                observed: t.observed.clone(),
                block: f(i, t),
            })
            .collect();
        let mut out = TrialSet::new(
            self.channels.clone(),
            trials,
            Some(self.weights.clone()),
            source_name,
        )?;
        out.labels = self.labels.clone();
        out.sessions = self.sessions.clone();
        Ok(out)
    }

    /// The same trials under other channel names (same count; names are
    /// validated like any input: non-empty, unique).
    pub fn with_channel_names(&self, names: Vec<String>, source_name: &str) -> Result<TrialSet> {
        if names.len() != self.channels.len() {
            return Err(LacunaError::InvalidTrials {
                source_name: source_name.to_string(),
                problems: vec![TrialProblem {
                    kind: ProblemKind::Other,
                    trial: None,
                    channel: None,
                    message: format!(
                        "{} channel names given for {} channels",
                        names.len(),
                        self.channels.len()
                    ),
                }],
            });
        }
        let mut out = TrialSet::new(
            names,
            self.trials.clone(),
            Some(self.weights.clone()),
            source_name,
        )?;
        out.labels = self.labels.clone();
        out.sessions = self.sessions.clone();
        Ok(out)
    }

    /// Builds a set of complete trials from full matrices (all channels observed).
    pub fn from_full(
        channels: Vec<String>,
        mats: Vec<Mat>,
        weights: Option<Vec<f64>>,
    ) -> Result<TrialSet> {
        let p = channels.len();
        let trials = mats
            .into_iter()
            .map(|m| Trial {
                observed: (0..p).collect(),
                block: m,
            })
            .collect();
        TrialSet::new(channels, trials, weights, "input")
    }
}

/// Default channel names `ch0, ch1, …` when a file gives none.
pub fn default_channel_names(p: usize) -> Vec<String> {
    (0..p).map(|c| format!("ch{c}")).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spd(k: usize, seed: usize) -> Mat {
        let b = Mat::from_fn(k, k, |i, j| {
            (((i + 1) * (j + 2) * (seed + 3)) % 7) as f64 / 7.0
        });
        &b * b.transpose() + Mat::identity(k, k)
    }

    // The ranks a selection or a channel drop carries over without checking
    // the blocks again must be the ranks a fresh validation finds (the
    // numerical-rank rule of numpy's matrix_rank: eigenvalues above
    // k·ε·λ_max; interlacing keeps principal sub-blocks of full-rank blocks
    // full rank). Blocks: full rank, rank 2 of 4 (a Gram matrix of two
    // vectors), nearly singular (condition 1e12).
    #[test]
    fn derived_sets_keep_the_ranks_a_fresh_check_finds() {
        let v = Mat::from_fn(4, 2, |i, j| (i + 2 * j + 1) as f64);
        let low = &v * v.transpose();
        let mut near = spd(4, 5);
        let e = crate::spd::kernels::sym_eigen(&near);
        near = e.apply(|x| if x == e.values[0] { x * 1e-12 } else { x });
        let trials = vec![
            Trial {
                observed: vec![0, 1, 2, 3],
                block: spd(4, 1),
            },
            Trial {
                observed: vec![0, 1, 2, 3],
                block: low,
            },
            Trial {
                observed: vec![0, 1, 2, 3],
                block: crate::spd::symmetrize(&near),
            },
            Trial {
                observed: vec![1, 2, 3],
                block: spd(3, 2),
            },
        ];
        let set = TrialSet::new(default_channel_names(4), trials, None, "s").unwrap();
        let fresh = |t: &TrialSet| {
            TrialSet::new(t.channels().to_vec(), t.trials().to_vec(), None, "again").unwrap()
        };
        for derived in [
            set.select_trials(&[3, 1, 1, 0, 2]).unwrap(),
            set.without_channels(&[0]).unwrap(),
            set.without_channels(&[2, 3]).unwrap(),
        ] {
            let again = fresh(&derived);
            for i in 0..derived.len() {
                assert_eq!(derived.rank(i), again.rank(i), "trial {i}");
            }
        }
        assert_eq!(set.rank(1), 2);
    }

    // Common practice, no source: every defect is reported with its trial and channel.
    #[test]
    fn reports_every_problem_with_trial_and_channel() {
        let ch = default_channel_names(3);
        let mut bad = spd(2, 1);
        bad[(1, 1)] = -5.0;
        let trials = vec![
            Trial {
                observed: vec![0, 1, 2],
                block: spd(3, 0),
            },
            Trial {
                observed: vec![0, 2],
                block: bad,
            },
            Trial {
                observed: vec![],
                block: Mat::zeros(0, 0),
            },
        ];
        let err = TrialSet::new(ch, trials, Some(vec![1.0, -1.0, 1.0]), "s.npy").unwrap_err();
        let msg = err.to_string();
        assert!(msg.contains("trial 1, channel ch2"), "{msg}");
        assert!(msg.contains("trial 2: no channel"), "{msg}");
        assert!(msg.contains("weight -1"), "{msg}");
        assert!(matches!(err, LacunaError::InvalidTrials { .. }));
    }

    #[test]
    fn groups_and_counts() {
        let ch = default_channel_names(3);
        let trials = vec![
            Trial {
                observed: vec![0, 1, 2],
                block: spd(3, 0),
            },
            Trial {
                observed: vec![0, 2],
                block: spd(2, 1),
            },
            Trial {
                observed: vec![0, 1, 2],
                block: spd(3, 2),
            },
        ];
        let set = TrialSet::new(ch, trials, None, "t").unwrap();
        let g = set.pattern_groups();
        assert_eq!(g.len(), 2);
        assert_eq!(g[0].trials, vec![0, 2]);
        let c = set.coobservation_counts();
        assert_eq!(c[0][2], 3);
        assert_eq!(c[1][2], 2);
        assert!(set.complete_blocks("airm").is_err());
        let dropped = set.without_channels(&[1]).unwrap();
        assert!(dropped.all_complete());
    }
}

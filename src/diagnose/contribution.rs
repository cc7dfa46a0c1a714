//! How much each channel contributed to a masked mean.
//!
//! For channel c (definitions in docs/schemes.md):
//! - `trials_observed`, `weight_share`: trials that observed c and their
//!   share of the total weight;
//! - `coobserved_with`: how many other channels were ever observed with c;
//! - `cost_share`: each trial's squared tangent residual
//!   ‖log(M_o^{-1/2} C M_o^{-1/2})‖²_F (M_o the mean's sub-block, symmetric
//!   square root) split over the residual's rows, row r going to channel
//!   o[r]; summed with the trial weights and divided by the total, so the
//!   shares add to 1;
//! - `leave_out_influence`: the affine-invariant distance, on the other
//!   channels, between the mean and the mean re-solved (warm-started)
//!   without any observation of c; on sets of more than
//!   `leave_out_trials` trials both means are those of one seeded subset of
//!   that size (a paired difference: the subset's own mean, then the subset
//!   without c; rarely observed channels keep all their trials, the others
//!   are drawn at random and weighted up), so the p re-solves cost what they
//!   cost at that size;
//! - bootstrap: trials resampled with replacement (seeded), the mean
//!   re-solved each time (warm-started); the 5–95% interval of c's variance
//!   and the median over other channels of the standard deviation of its
//!   correlation with them.

use std::borrow::Cow;

use rayon::prelude::*;
use serde::Serialize;

use crate::error::Result;
use crate::schemes::{AirmObserved, AveragingScheme, SchemeOptions};
use crate::simulate::rng::Rng;
use crate::spd::Mat;
use crate::spd::distance::airm_distance;
use crate::spd::kernels::sym_eigen;
use crate::trials::TrialSet;

/// One channel's contribution.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct ChannelContribution {
    pub channel: String,
    pub trials_observed: usize,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub weight_share: f64,
    pub coobserved_with: usize,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub cost_share: f64,
    pub leave_out_influence: Option<f64>,
    /// Trials the leave-one-out re-solves used (all, or a seeded subset).
    #[serde(default)]
    pub leave_out_trials: Option<usize>,
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub variance: f64,
    /// 5% and 95% bootstrap quantiles of the variance.
    pub variance_interval: Option<[f64; 2]>,
    /// Median over other channels of the bootstrap SD of the correlation.
    pub correlation_sd: Option<f64>,
}

/// Options: which measures to compute.
#[derive(Debug, Clone)]
pub struct ContributionOptions {
    pub leave_one_out: bool,
    /// Most trials the leave-one-out re-solves use (a seeded random subset
    /// beyond that, [`LEAVE_OUT_TRIALS`] by default).
    pub leave_out_trials: usize,
    /// Bootstrap resamples (0 = none).
    pub bootstrap: usize,
    pub seed: u64,
    pub scheme_options: SchemeOptions,
}

/// Default cap on the trials of the leave-one-out re-solves. Measured on
/// the compare bench's trials (N = 10 000, `lacuna-bench --mode influence`;
/// docs/performance.md): a 2 000-trial subset gave every channel's
/// influence within +0.5 % to +3.2 % of the whole set's at p = 64 (94 s
/// instead of 403 s), −0.7 % to +1.6 % at p = 32 (6.7 s instead of 36.8 s).
pub const LEAVE_OUT_TRIALS: usize = 2000;

/// A channel expected in fewer trials than this in a uniform subset keeps
/// all its trials there: a random draw would leave a rarely observed
/// channel a handful of trials (or none), and its influence mostly noise.
pub const LEAVE_OUT_MIN_TRIALS: usize = 50;

/// The leave-one-out subset as `(trials, weight factors)`, or None to use
/// every trial (the set is within `cap`, or the kept trials alone would
/// reach it). Every trial that observed a channel expected in fewer than
/// [`LEAVE_OUT_MIN_TRIALS`] trials of a uniform subset of size `cap` is
/// kept, with factor 1; the others are a seeded random draw up to `cap`,
/// each standing for `(n − kept) / (cap − kept)` trials (the usual
/// inverse-probability weight of a stratified sample), so the subset's
/// weighted mix of trials is the whole set's in expectation. Without the
/// factor, a rare channel's kept trials would weigh `n / cap` times too much
/// and its influence with them (tests/select.rs: 1.8–2.0× at `n / cap` = 2).
/// `seen[c]`: the trials that observed channel c.
fn leave_out_subset(
    set: &TrialSet,
    seen: &[usize],
    cap: usize,
    seed: u64,
) -> Option<(Vec<usize>, Vec<f64>)> {
    let n = set.len();
    if n <= cap {
        return None;
    }
    // Expected count in a uniform subset: seen · cap / n.
    let rare = |c: usize| seen[c] * cap < LEAVE_OUT_MIN_TRIALS * n;
    let (kept, mut drawn): (Vec<usize>, Vec<usize>) =
        (0..n).partition(|&i| set.trials()[i].observed.iter().any(|&c| rare(c)));
    if kept.len() >= cap {
        return None;
    }
    let stands_for = (n - kept.len()) as f64 / (cap - kept.len()) as f64;
    crate::select::seeded_subset(&mut drawn, cap - kept.len(), seed ^ 0x100C);
    let mut idx: Vec<(usize, f64)> = kept.into_iter().map(|i| (i, 1.0)).collect();
    idx.extend(drawn.into_iter().map(|i| (i, stands_for)));
    idx.sort_unstable_by_key(|&(i, _)| i);
    Some(idx.into_iter().unzip())
}

/// Per-trial cost split over channels: Σ ŵ_i ‖row_r(T_i)‖² per channel.
pub fn cost_split(set: &TrialSet, mean: &Mat) -> Vec<f64> {
    let p = set.n_channels();
    let w = set.normalized_weights();
    let parts: Vec<Vec<f64>> = set
        .trials()
        .par_iter()
        .zip(w.par_iter())
        .map(|(t, &wi)| {
            let o = &t.observed;
            let m = crate::spd::sub_block(mean, o);
            let isq = sym_eigen(&m).apply(|v| 1.0 / v.sqrt());
            let inner = crate::spd::symmetrize(&(&isq * &t.block * &isq));
            let log = sym_eigen(&inner).apply(f64::ln);
            let mut out = vec![0.0; p];
            for (r, &c) in o.iter().enumerate() {
                out[c] = wi * log.row(r).norm_squared();
            }
            out
        })
        .collect();
    let mut total = vec![0.0; p];
    for part in parts {
        for (a, b) in total.iter_mut().zip(part) {
            *a += b;
        }
    }
    total
}

/// Computes every channel's contribution to `mean`, the airm-observed mean of `set`.
/// The re-solves (leave-one-out, bootstrap) start from `mean` and stop at a
/// relative gradient norm of max(tol, 1e-4): they measure changes of order
/// 1e-2 (influence) and spreads of a few percent (bootstrap), to which that
/// stop adds an error of about 1e-4 — and it saves most of the p + B solves' cost.
pub fn contributions(
    set: &TrialSet,
    mean: &Mat,
    opts: &ContributionOptions,
) -> Result<Vec<ChannelContribution>> {
    let mut resolve = opts.scheme_options.clone();
    resolve.stop.tol = resolve.stop.tol.max(1e-4);
    let opts = &ContributionOptions {
        scheme_options: resolve,
        ..opts.clone()
    };
    let p = set.n_channels();
    let summary = crate::diagnose::summarize(set, mean);
    let counts = set.coobservation_counts();
    let split = cost_split(set, mean);
    let total: f64 = split.iter().sum();
    // Every re-solve holds its own copy of the trials (one at a time on
    // large sets, crate::select::SIDE_BY_SIDE_BYTES).
    let side_by_side = crate::select::side_by_side(set);
    // Beyond the cap, the influence is a paired difference on one seeded
    // subset: its own mean first (warm-started from `mean`), then the
    // subset without each channel. A subset whose own mean fails leaves the
    // influences unknown, as a failed re-solve does.
    let loo_wanted = opts.leave_one_out && p > 2;
    let subset = if loo_wanted {
        let seen: Vec<usize> = (0..p).map(|c| counts[c][c]).collect();
        leave_out_subset(set, &seen, opts.leave_out_trials, opts.seed)
    } else {
        None
    };
    let base = match subset {
        None => Some((Cow::Borrowed(set), Cow::Borrowed(mean))),
        Some((idx, factor)) => set.select_trials(&idx).ok().and_then(|mut sub| {
            let w = idx.iter().zip(&factor).map(|(&i, f)| set.weights()[i] * f);
            sub.set_weights(w.collect()).ok()?;
            let o = SchemeOptions {
                warm_start: Some(std::sync::Arc::new(mean.clone())),
                observer: None,
                starts: 1,
                ..opts.scheme_options.clone()
            };
            let m = AirmObserved.average(&sub, &o).ok()?.mean;
            Some((Cow::Owned(sub), Cow::Owned(m)))
        }),
    }
    .filter(|_| loo_wanted);
    let loo_trials = base.as_ref().map(|(s, _)| s.len());
    let loo: Vec<Option<f64>> = if let Some((set, mean)) = &base {
        crate::select::map_units(p, crate::select::side_by_side(set), |c| {
            let rest: Vec<usize> = (0..p).filter(|&k| k != c).collect();
            // Trials that observed only c have nothing left: leave them out.
            let keep: Vec<usize> = (0..set.len())
                .filter(|&i| set.trials()[i].observed.iter().any(|&k| k != c))
                .collect();
            let sub = if keep.len() == set.len() {
                set.without_channels(&[c]).ok()?
            } else {
                set.select_trials(&keep).ok()?.without_channels(&[c]).ok()?
            };
            let start = crate::spd::sub_block(mean, &rest);
            let o = SchemeOptions {
                warm_start: Some(std::sync::Arc::new(start.clone())),
                observer: None,
                starts: 1,
                ..opts.scheme_options.clone()
            };
            let r = AirmObserved.average(&sub, &o).ok()?;
            Some(airm_distance(&r.mean, &start))
        })
    } else {
        vec![None; p]
    };
    let boot: Vec<Mat> = crate::select::map_units(opts.bootstrap, side_by_side, |b| {
        let mut rng = Rng::new(opts.seed ^ (0xB007u64.wrapping_mul(b as u64 + 1)));
        let idx: Vec<usize> = (0..set.len()).map(|_| rng.below(set.len())).collect();
        let sub = set.select_trials(&idx).ok()?;
        let o = SchemeOptions {
            warm_start: Some(std::sync::Arc::new(mean.clone())),
            observer: None,
            starts: 1,
            ..opts.scheme_options.clone()
        };
        AirmObserved.average(&sub, &o).ok().map(|r| r.mean)
    })
    .into_iter()
    .flatten()
    .collect();
    Ok((0..p)
        .map(|c| {
            let (variance_interval, correlation_sd) = if boot.len() >= 2 {
                let mut v: Vec<f64> = boot.iter().map(|m| m[(c, c)]).collect();
                let q05 = crate::ingest::detect::quantile_in_place(&mut v, 0.05);
                let q95 = crate::ingest::detect::quantile_in_place(&mut v, 0.95);
                let mut sds: Vec<f64> = (0..p)
                    .filter(|&k| k != c)
                    .map(|k| {
                        let r: Vec<f64> = boot
                            .iter()
                            .map(|m| m[(c, k)] / (m[(c, c)] * m[(k, k)]).sqrt())
                            .collect();
                        let mu = r.iter().sum::<f64>() / r.len() as f64;
                        (r.iter().map(|x| (x - mu).powi(2)).sum::<f64>() / (r.len() - 1) as f64)
                            .sqrt()
                    })
                    .collect();
                let med = if sds.is_empty() {
                    None
                } else {
                    Some(crate::ingest::detect::quantile_in_place(&mut sds, 0.5))
                };
                (Some([q05, q95]), med)
            } else {
                (None, None)
            };
            ChannelContribution {
                channel: set.channels()[c].clone(),
                trials_observed: summary.coverage[c].trials_observed,
                weight_share: summary.coverage[c].weight_share,
                coobserved_with: (0..p).filter(|&k| k != c && counts[c][k] > 0).count(),
                cost_share: if total > 0.0 { split[c] / total } else { 0.0 },
                leave_out_influence: loo[c],
                leave_out_trials: loo_trials,
                variance: mean[(c, c)],
                variance_interval,
                correlation_sd,
            }
        })
        .collect())
}

//! Robust masked means: the Riemannian median and a Huber-type mean fitted
//! to each trial's observed block.
//!
//! The masked mean minimises Σ w_i δ²(X[o_i,o_i], C_i); one gross artefact
//! (a channel whose variance jumped a hundredfold) pulls it by its squared
//! distance. The robust costs grow more slowly:
//! - **median**: Σ w_i δ_i, δ_i = δ(X[o_i,o_i], C_i) — the Riemannian median
//!   (Fletcher, Venkatasubramanian, Joshi 2009, "The geometric median on
//!   Riemannian manifolds with application to robust atlas estimation",
//!   NeuroImage 45), here over observed sub-blocks;
//! - **Huber**: Σ w_i ρ_c(δ_i) with ρ_c(δ) = δ²/2 for δ ≤ c and
//!   c δ − c²/2 beyond (Huber 1964, "Robust estimation of a location
//!   parameter", Ann. Math. Statist. 35): squared near the centre, linear for
//!   outliers.
//!
//! Both are solved by iteratively reweighted masked means (the Weiszfeld
//! idea carried to the manifold, as in Fletcher et al.): at the current X,
//! trial i gets the weight w_i ρ'(δ_i)/δ_i — w_i/δ_i for the median,
//! w_i min(1, c/δ_i) for Huber — and the next X is the masked mean with those
//! weights, warm-started at X. Its gradient condition is exactly the robust
//! cost's, so a fixed point is a stationary point of the robust cost. The
//! Huber threshold is c = k · median_i δ_i at the squared-distance mean
//! (k = `SchemeOptions::huber`, default 1.5): trials up to one and a half
//! times the typical distance count fully.

use super::{AirmObserved, AveragingScheme, MeanResult, SchemeId, SchemeOptions};
use crate::error::{LacunaError, Result};
use crate::spd::{Mat, airm_distance, sub_block};
use crate::trials::TrialSet;

/// Outer (reweighting) iterations at most.
const MAX_OUTER: usize = 200;

/// Which robust loss.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Loss {
    Median,
    Huber,
}

/// The masked Riemannian median (`airm-observed-median`).
pub struct ObservedMedian;
/// The masked Huber-type mean (`airm-observed-huber`).
pub struct ObservedHuber;

/// Distances of every trial's observed block to the matching sub-block of `x`.
pub fn observed_distances(set: &TrialSet, x: &Mat) -> Vec<f64> {
    use rayon::prelude::*;
    set.trials()
        .par_iter()
        .map(|t| airm_distance(&sub_block(x, &t.observed), &t.block))
        .collect()
}

/// Trials whose distance to the mean is an outlier by the modified z-score
/// 0.6745 (δ_i − median δ) / MAD > 3.5 (Iglewicz & Hoaglin 1993, "How to
/// detect and handle outliers", from memory), with the scores.
pub fn outliers(distances: &[f64]) -> Vec<(usize, f64)> {
    let mut d = distances.to_vec();
    let med = crate::ingest::detect::quantile_in_place(&mut d, 0.5);
    let mut dev: Vec<f64> = distances.iter().map(|v| (v - med).abs()).collect();
    let mad = crate::ingest::detect::quantile_in_place(&mut dev, 0.5);
    if !(mad > 0.0) {
        return Vec::new();
    }
    distances
        .iter()
        .enumerate()
        .map(|(i, v)| (i, 0.6745 * (v - med) / mad))
        .filter(|(_, z)| *z > 3.5)
        .collect()
}

/// [`outliers`] with each trial's distance, as the reports list them.
pub fn outlier_trials(distances: &[f64]) -> Vec<super::OutlierTrial> {
    outliers(distances)
        .into_iter()
        .map(|(trial, z)| super::OutlierTrial {
            trial,
            distance: distances[trial],
            z,
        })
        .collect()
}

fn robust(loss: Loss, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
    let plain = SchemeOptions {
        observer: None,
        ..options.clone()
    };
    let first = AirmObserved.average(set, &plain)?;
    let mut x = first.mean.clone();
    let base = set.weights().to_vec();
    let d0 = observed_distances(set, &x);
    let mut sorted = d0.clone();
    let median0 = crate::ingest::detect::quantile_in_place(&mut sorted, 0.5);
    let c = options.huber * median0;
    // Below this a distance counts as zero (the iterate sits on a trial).
    let floor = 1e-12 * median0.max(1e-300);
    let cost = |d: &[f64]| -> f64 {
        d.iter()
            .zip(&base)
            .map(|(&di, &w)| {
                w * match loss {
                    Loss::Median => di,
                    Loss::Huber if di <= c => 0.5 * di * di,
                    Loss::Huber => c * di - 0.5 * c * c,
                }
            })
            .sum()
    };
    let mut d = d0;
    // One copy of the set, its weights replaced at each reweighting.
    let mut reweighted = set.clone();
    let mut outer = 0;
    let mut inner_iterations = first.diagnostics.iterations;
    let mut converged = false;
    let mut last_step = f64::NAN;
    let mut last_gradient = first.diagnostics.gradient_norm;
    while outer < MAX_OUTER {
        let w: Vec<f64> = d
            .iter()
            .zip(&base)
            .map(|(&di, &wi)| {
                wi * match loss {
                    Loss::Median => 1.0 / di.max(floor),
                    Loss::Huber => (c / di.max(floor)).min(1.0),
                }
            })
            .collect();
        reweighted.set_weights(w)?;
        let opts = SchemeOptions {
            observer: None,
            warm_start: Some(std::sync::Arc::new(x.clone())),
            starts: 1,
            ..options.clone()
        };
        let r = AirmObserved.average(&reweighted, &opts)?;
        inner_iterations += r.diagnostics.iterations;
        last_gradient = r.diagnostics.gradient_norm;
        if !r.diagnostics.converged {
            return Err(LacunaError::Numerical(format!(
                "a reweighted masked mean did not converge at outer iteration {} ({:?})",
                outer + 1,
                r.diagnostics.stop_reason
            )));
        }
        last_step = airm_distance(&x, &r.mean);
        x = r.mean;
        d = observed_distances(set, &x);
        outer += 1;
        // The fixed point is met when a reweighting no longer moves the mean.
        if last_step <= options.stop.tol {
            converged = true;
            break;
        }
    }
    let mut diagnostics = first.diagnostics.clone();
    diagnostics.converged = converged;
    diagnostics.iterations = outer;
    diagnostics.cost = Some(cost(&d));
    // The reweighted cost's gradient at the final X is the robust cost's
    // (up to the weights' normalisation): the last inner solve's.
    diagnostics.gradient_norm = last_gradient;
    diagnostics.trace.clear();
    diagnostics.notes = vec![format!(
        "{}: {outer} reweighting steps ({inner_iterations} inner L-BFGS iterations in all), last step {last_step:.1e} (affine-invariant; tolerance {:.0e}); started from the squared-distance masked mean",
        match loss {
            Loss::Median =>
                "Riemannian median over observed blocks (Weiszfeld-type reweighting)".to_string(),
            Loss::Huber => format!(
                "Huber-type mean, threshold c = {:.3} × median distance = {c:.4e}",
                options.huber
            ),
        },
        options.stop.tol
    )];
    let flagged = outlier_trials(&d);
    if !flagged.is_empty() {
        let list: Vec<String> = flagged
            .iter()
            .take(20)
            .map(|o| format!("{} (z = {:.1})", o.trial, o.z))
            .collect();
        diagnostics.notes.push(format!(
            "{} trial(s) flagged as outliers (modified z-score of the distance to this mean above 3.5): {}{}",
            flagged.len(),
            list.join(", "),
            if flagged.len() > 20 { ", …" } else { "" }
        ));
    }
    diagnostics.outliers = flagged;
    if !converged {
        diagnostics.notes.push(format!(
            "the reweighting did not settle within {MAX_OUTER} steps"
        ));
    }
    Ok(MeanResult {
        scheme: match loss {
            Loss::Median => SchemeId::ObservedMedian.name().into(),
            Loss::Huber => SchemeId::ObservedHuber.name().into(),
        },
        mean: x,
        diagnostics,
    })
}

impl AveragingScheme for ObservedMedian {
    fn id(&self) -> SchemeId {
        SchemeId::ObservedMedian
    }
    fn summary(&self) -> &'static str {
        "Riemannian median fitted to each trial's observed block: robust to gross artefacts"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        robust(Loss::Median, set, options)
    }
}

impl AveragingScheme for ObservedHuber {
    fn id(&self) -> SchemeId {
        SchemeId::ObservedHuber
    }
    fn check(&self, options: &SchemeOptions) -> Result<()> {
        options.stop.check()?;
        crate::error::float_in("huber", options.huber, (1e-3, 1e3))
    }
    fn summary(&self) -> &'static str {
        "Huber-type mean over observed blocks: squared distance near the centre, linear for outliers"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        robust(Loss::Huber, set, options)
    }
}

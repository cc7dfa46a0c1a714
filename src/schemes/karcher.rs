//! The affine-invariant (Karcher) mean of complete trials.
//!
//! Minimises `F(X) = ½ Σ ŵ_i δ²(X, C_i)` with normalised weights `ŵ`. At
//! `X = W Wᵀ` the whitened gradient is `−Σ ŵ_i log(W⁻¹ C_i W⁻ᵀ)` (Moakher 2005,
//! SIAM J. Matrix Anal. Appl.; Pennec, Fillard, Ayache 2006). The cost is
//! geodesically convex, so the minimiser is unique.
//!
//! This is the masked cost with every channel observed, so the scheme reuses
//! [`MaskedKarcherProblem`] (one observation pattern, one Cholesky factor per
//! evaluation) and the Riemannian L-BFGS solver. The first step, and any step
//! after a memory reset, is scaled by the step of Bini & Iannazzo (2013,
//! "Computing the Karcher mean of symmetric positive definite matrices",
//! Linear Algebra Appl. 438): `θ = 2 / Σ ŵ_i ((c_i+1)/(c_i−1)) ln c_i` with
//! `c_i` the condition number of the whitened `C_i` (formula quoted from
//! memory; the line search makes it a suggestion, not a requirement).
//! Starting point: the log-Euclidean mean when there are at most
//! [`START_SAMPLE`] trials; otherwise the Karcher mean of [`START_SAMPLE`]
//! evenly spaced trials to a loose tolerance. The full log-Euclidean mean
//! would cost one eigendecomposition per trial — a whole iteration — and
//! starts farther away (docs/performance.md).

use super::{
    AveragingScheme, Diagnostics, LogEuclidean, MaskedKarcherProblem, MeanResult, SchemeOptions,
};
use crate::error::{LacunaError, Result};
use crate::solve::{IterRecord, lbfgs};
use crate::trials::TrialSet;

/// Affine-invariant Karcher mean of complete trials.
pub struct Karcher;

/// Most trials used to build the starting point.
pub const START_SAMPLE: usize = 256;

/// Starting point and how it was made. Up to 4 × [`START_SAMPLE`] trials:
/// their log-Euclidean mean. More: the Karcher mean of an evenly spaced
/// subsample of [`START_SAMPLE`] trials, solved to a loose tolerance (1e-6) —
/// within sampling error of the answer, at a fraction of one full iteration
/// (below 4 × START_SAMPLE trials the subsample solve costs more than the
/// iteration it saves).
fn starting_point(trials: &TrialSet) -> Result<(crate::spd::Mat, String)> {
    let n = trials.len();
    if n <= 4 * START_SAMPLE {
        let m = LogEuclidean
            .average(trials, &SchemeOptions::default())?
            .mean;
        return Ok((m, "started from the log-Euclidean mean".into()));
    }
    let stride = n.div_ceil(START_SAMPLE);
    let picked: Vec<usize> = (0..n).step_by(stride).collect();
    let blocks = trials.complete_blocks("airm")?;
    let w = trials.weights();
    let ws: Vec<f64> = picked.iter().map(|&i| w[i]).collect();
    if ws.iter().all(|&v| v == 0.0) {
        let m = LogEuclidean
            .average(trials, &SchemeOptions::default())?
            .mean;
        return Ok((m, "started from the log-Euclidean mean".into()));
    }
    let mats = picked.iter().map(|&i| blocks[i].clone()).collect();
    let sample = TrialSet::from_full(trials.channels().to_vec(), mats, Some(ws))?;
    let loose = SchemeOptions {
        stop: crate::solve::StopRule {
            tol: 1e-6,
            max_iter: 100,
        },
        ..SchemeOptions::default()
    };
    let warm = Karcher.average(&sample, &loose)?;
    let note = format!(
        "warm start: Karcher mean of {} evenly spaced trials ({} iterations to gradient {:.1e})",
        picked.len(),
        warm.diagnostics.iterations,
        warm.diagnostics.gradient_norm.unwrap_or(f64::NAN)
    );
    Ok((warm.mean, note))
}

impl AveragingScheme for Karcher {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::Karcher
    }
    fn corrects_scale(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "affine-invariant Riemannian (Karcher) mean of complete trials"
    }
    fn handles_missing(&self) -> bool {
        false
    }
    fn compute(&self, trials: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        trials.complete_blocks(self.name())?;
        // A given warm start of the right size that is positive definite
        // replaces the starting rule (re-solves on part of the data).
        let warm = options
            .warm_start
            .as_deref()
            .filter(|x| x.nrows() == trials.n_channels())
            .filter(|x| crate::spd::kernels::cholesky(x).is_some());
        let (start, start_note) = match warm {
            Some(x) => (x.clone(), "started from the given warm start".to_string()),
            None => starting_point(trials)?,
        };
        let problem = MaskedKarcherProblem::new(trials);
        let obs = options.observer.clone();
        let observer = obs.as_deref().map(|f| f as &(dyn Fn(&IterRecord) + Sync));
        let sol = lbfgs::minimize(&problem, &start, &options.stop, observer).ok_or_else(|| {
            LacunaError::Numerical("the starting point is not positive definite".into())
        })?;
        let mut diagnostics = Diagnostics::from_solution(&sol, options.stop.tol);
        diagnostics.notes.push(start_note);
        Ok(MeanResult {
            scheme: self.name().into(),
            mean: sol.x,
            diagnostics,
        })
    }
}

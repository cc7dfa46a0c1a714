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
//! Starting point: the log-Euclidean mean.

use super::{AveragingScheme, Diagnostics, LogEuclidean, MaskedKarcherProblem, MeanResult, SchemeOptions};
use crate::error::{LacunaError, Result};
use crate::solve::{lbfgs, IterRecord};
use crate::trials::TrialSet;

/// Affine-invariant Karcher mean of complete trials.
pub struct Karcher;

impl AveragingScheme for Karcher {
    fn name(&self) -> &'static str {
        "airm"
    }
    fn summary(&self) -> &'static str {
        "affine-invariant Riemannian (Karcher) mean of complete trials"
    }
    fn handles_missing(&self) -> bool {
        false
    }
    fn average(&self, trials: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        trials.complete_blocks(self.name())?;
        let start = LogEuclidean.average(trials, options)?.mean;
        let problem = MaskedKarcherProblem::new(trials);
        let obs = options.observer.clone();
        let observer = obs.as_deref().map(|f| f as &(dyn Fn(&IterRecord) + Sync));
        let sol = lbfgs::minimize(&problem, &start, &options.stop, observer)
            .ok_or_else(|| LacunaError::Numerical("the log-Euclidean starting point is not positive definite".into()))?;
        let mut diagnostics = Diagnostics::from_solution(&sol, options.stop.tol);
        diagnostics.notes.push("started from the log-Euclidean mean".into());
        Ok(MeanResult { scheme: self.name().into(), mean: sol.x, diagnostics })
    }
}

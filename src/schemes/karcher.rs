//! The affine-invariant (Karcher) mean of complete trials.
//!
//! Minimises `F(X) = ½ Σ ŵ_i δ²(X, C_i)` with normalised weights `ŵ`. At
//! `X = W Wᵀ` the whitened gradient is `−Σ ŵ_i log(W⁻¹ C_i W⁻ᵀ)` (Moakher 2005,
//! SIAM J. Matrix Anal. Appl.; Pennec, Fillard, Ayache 2006). The cost is
//! geodesically convex, so the minimiser is unique.
//!
//! Solver: Riemannian L-BFGS ([`crate::solve::lbfgs`]). Its first step, and
//! any step after a memory reset, is scaled by the step of Bini & Iannazzo
//! (2013, "Computing the Karcher mean of symmetric positive definite
//! matrices", Linear Algebra Appl. 438): `θ = 2 / Σ ŵ_i ((c_i+1)/(c_i−1)) ln c_i`
//! with `c_i` the condition number of the whitened `W⁻¹ C_i W⁻ᵀ` (the formula
//! is quoted from memory; the line search makes it a suggestion, not a
//! requirement). Starting point: the log-Euclidean mean.

use super::{AveragingScheme, Diagnostics, LogEuclidean, MeanResult, SchemeOptions};
use crate::error::{LacunaError, Result};
use crate::solve::{chunked, lbfgs, Evaluation, SpdProblem};
use crate::spd::kernels::{rebuild, sym_eigen};
use crate::spd::{symmetrize, Mat};
use crate::trials::TrialSet;

/// Affine-invariant Karcher mean of complete trials.
pub struct Karcher;

/// The full-data Karcher cost over a list of SPD matrices.
pub struct KarcherProblem<'a> {
    blocks: Vec<&'a Mat>,
    weights: Vec<f64>,
}

impl<'a> KarcherProblem<'a> {
    /// Builds the problem; `weights` are normalised here.
    pub fn new(blocks: Vec<&'a Mat>, weights: &[f64]) -> Self {
        let s: f64 = weights.iter().sum();
        KarcherProblem { blocks, weights: weights.iter().map(|w| w / s).collect() }
    }
}

/// The Bini–Iannazzo term `((c+1)/(c−1)) ln c`, with its limit 2 at `c = 1`.
pub(crate) fn step_term(c: f64) -> f64 {
    if c < 1.0 + 1e-8 { 2.0 } else { (c + 1.0) / (c - 1.0) * c.ln() }
}

/// Per-chunk partial sums: whitened log sum, cost, step-hint denominator.
pub(crate) struct Partial {
    pub logs: Mat,
    pub cost: f64,
    pub hint: f64,
    pub ok: bool,
}

impl SpdProblem for KarcherProblem<'_> {
    fn size(&self) -> usize {
        self.blocks[0].nrows()
    }

    fn evaluate(&self, _w: &Mat, w_inv: &Mat) -> Option<Evaluation> {
        let p = self.size();
        let parts = chunked(self.blocks.len(), 32, |r| {
            let mut part = Partial { logs: Mat::zeros(p, p), cost: 0.0, hint: 0.0, ok: true };
            for i in r {
                let wi = self.weights[i];
                if wi == 0.0 {
                    continue;
                }
                let m = symmetrize(&(w_inv * self.blocks[i] * w_inv.transpose()));
                let e = sym_eigen(&m);
                let (lo, hi) = (e.values[0], e.values[p - 1]);
                if !(lo > 0.0) || !hi.is_finite() {
                    part.ok = false;
                    break;
                }
                let logs: Vec<f64> = e.values.iter().map(|v| v.ln()).collect();
                part.cost += 0.5 * wi * logs.iter().map(|l| l * l).sum::<f64>();
                part.hint += wi * step_term(hi / lo);
                let scaled: Vec<f64> = logs.iter().map(|l| wi * l).collect();
                part.logs += rebuild(&e.vectors, &scaled);
            }
            part
        });
        let mut grad = Mat::zeros(p, p);
        let (mut cost, mut hint) = (0.0, 0.0);
        for part in parts {
            if !part.ok {
                return None;
            }
            grad -= part.logs;
            cost += part.cost;
            hint += part.hint;
        }
        Some(Evaluation { cost, grad, step_hint: Some(2.0 / hint) })
    }
}

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
        let blocks = trials.complete_blocks(self.name())?;
        let start = LogEuclidean.average(trials, options)?.mean;
        let problem = KarcherProblem::new(blocks, trials.weights());
        let obs = options.observer.clone();
        let observer = obs.as_deref().map(|f| f as &(dyn Fn(&crate::solve::IterRecord) + Sync));
        let sol = lbfgs::minimize(&problem, &start, &options.stop, observer)
            .ok_or_else(|| LacunaError::Numerical("the log-Euclidean starting point is not positive definite".into()))?;
        let mut diagnostics = Diagnostics::from_solution(&sol, options.stop.tol);
        diagnostics.notes.push("started from the log-Euclidean mean".into());
        Ok(MeanResult { scheme: self.name().into(), mean: sol.x, diagnostics })
    }
}

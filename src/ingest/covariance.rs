//! Covariance of one epoch: sample, Ledoit–Wolf, or OAS.
//!
//! The input is a p × T block (channels × samples) of the observed channels
//! only. Each estimator centres every channel on its own mean.
//! - sample: S = X Xᵀ / (T − 1), numpy.cov's convention;
//! - Ledoit–Wolf (Ledoit & Wolf 2004, "A well-conditioned estimator for
//!   large-dimensional covariance matrices", J. Multivariate Anal.):
//!   (1 − ρ) S₁ + ρ μ I with S₁ = X Xᵀ / T, μ = tr S₁ / p and
//!   ρ = min(β, δ)/δ, δ = ‖S₁ − μI‖²/p, β = (Σₜ‖xₜ‖⁴/T − ‖S₁‖²)/(pT);
//! - OAS (Chen, Wiesel, Eldar & Hero 2010, "Shrinkage algorithms for MMSE
//!   covariance estimation", IEEE Trans. Signal Process.): the same target
//!   with ρ = min((tr S₁² + tr² S₁) / ((T + 1)(tr S₁² − tr² S₁ / p)), 1),
//!   the form scikit-learn 1.5 uses (checked against its fixtures).
//!
//! The shrinkage intensity ρ (0 for the sample estimator) and the numerical
//! rank of S₁ are returned beside the matrix, for the epoch report.

use crate::Mat;
use serde::{Deserialize, Serialize};

/// Which estimator to use per epoch.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Estimator {
    Sample,
    LedoitWolf,
    Oas,
}

impl Estimator {
    /// Parses a command-line name.
    pub fn parse(name: &str) -> Option<Estimator> {
        match name {
            "sample" => Some(Estimator::Sample),
            "ledoit-wolf" | "lw" => Some(Estimator::LedoitWolf),
            "oas" => Some(Estimator::Oas),
            _ => None,
        }
    }
    /// The command-line name.
    pub fn name(self) -> &'static str {
        match self {
            Estimator::Sample => "sample",
            Estimator::LedoitWolf => "ledoit-wolf",
            Estimator::Oas => "oas",
        }
    }
}

/// One epoch's estimate.
#[derive(Debug, Clone)]
pub struct CovEstimate {
    pub cov: Mat,
    /// Shrinkage intensity ρ in [0, 1] (0 for the sample estimator).
    pub shrinkage: f64,
    /// Numerical rank of the (unshrunk) sample covariance.
    pub rank: usize,
}

/// The statistics an estimate needs, for all channels of one epoch, so
/// that any subset of channels can be estimated later without the samples:
/// S₁ = X Xᵀ / T of the centred samples and, for Ledoit–Wolf, the fourth
/// moments Q = Σₜ (xₜ²)(xₜ²)ᵀ (Σₜ‖xₜ,ₒ‖⁴ is the sum of Q over o × o).
#[derive(Debug, Clone)]
pub struct Moments {
    pub s1: Mat,
    pub q: Option<Mat>,
    pub samples: usize,
}

impl Moments {
    /// Moments of `x` (p × T, one row per channel).
    pub fn of(x: &Mat, with_fourth: bool) -> Moments {
        Moments::of_columns(&x.transpose(), with_fourth)
    }

    /// Moments of `xt` (T × p, one column per channel: the layout in which
    /// each channel's samples are contiguous, so centring and the products
    /// XᵀX run on contiguous memory).
    pub fn of_columns(xt: &Mat, with_fourth: bool) -> Moments {
        let t = xt.nrows();
        let mut xc = xt.clone();
        for mut col in xc.column_iter_mut() {
            let m = col.iter().sum::<f64>() / t as f64;
            col.add_scalar_mut(-m);
        }
        // Through the transpose: nalgebra multiplies general products with
        // a blocked GEMM, while tr_mul takes one dot product per entry.
        let xct = xc.transpose();
        let s1 = crate::spd::symmetrize(&(&xct * &xc / t as f64));
        let q = with_fourth.then(|| {
            let x2 = xc.map(|v| v * v);
            x2.transpose() * &x2
        });
        Moments { s1, q, samples: t }
    }

    /// The estimate on channel subset `o` (indices into the rows).
    pub fn estimate(&self, o: &[usize], estimator: Estimator) -> CovEstimate {
        let p = o.len();
        let t = self.samples as f64;
        let s1 = self.s1.select_rows(o).select_columns(o);
        let rank = numerical_rank(&s1);
        let tr = s1.trace();
        let mu = tr / p as f64;
        let fro2 = s1.norm_squared();
        let shrinkage = match estimator {
            Estimator::Sample => 0.0,
            Estimator::LedoitWolf => {
                let q = self
                    .q
                    .as_ref()
                    .expect("fourth moments computed for Ledoit–Wolf");
                let fourth: f64 = o
                    .iter()
                    .map(|&i| o.iter().map(|&j| q[(i, j)]).sum::<f64>())
                    .sum();
                let beta = (fourth / t - fro2) / (p as f64 * t);
                let delta = (fro2 - 2.0 * mu * tr + p as f64 * mu * mu) / p as f64;
                let beta = beta.min(delta);
                if beta == 0.0 { 0.0 } else { beta / delta }
            }
            Estimator::Oas => {
                let num = fro2 + tr * tr;
                let den = (t + 1.0) * (fro2 - tr * tr / p as f64);
                if den == 0.0 {
                    1.0
                } else {
                    (num / den).min(1.0)
                }
            }
        };
        let cov = match estimator {
            Estimator::Sample => s1 * (t / (t - 1.0).max(1.0)),
            _ => {
                let mut c = s1 * (1.0 - shrinkage);
                for i in 0..p {
                    c[(i, i)] += shrinkage * mu;
                }
                c
            }
        };
        CovEstimate {
            cov,
            shrinkage,
            rank,
        }
    }
}

/// Estimates the covariance of `x` (p × T, one row per channel).
pub fn estimate(x: &Mat, estimator: Estimator) -> CovEstimate {
    let all: Vec<usize> = (0..x.nrows()).collect();
    Moments::of(x, estimator == Estimator::LedoitWolf).estimate(&all, estimator)
}

/// The OAS intensity for a covariance estimate `s` from `samples` samples
/// (the formula above, with S₁ taken as `s`).
pub fn oas_intensity(s: &Mat, samples: usize) -> f64 {
    let p = s.nrows() as f64;
    let tr = s.trace();
    let fro2 = s.norm_squared();
    let den = (samples as f64 + 1.0) * (fro2 - tr * tr / p);
    if den <= 0.0 {
        1.0
    } else {
        ((fro2 + tr * tr) / den).min(1.0)
    }
}

/// Eigenvalues above p · ε · λ_max count toward the rank (the numpy
/// matrix_rank convention, applied to a symmetric matrix).
pub fn numerical_rank(s: &Mat) -> usize {
    let ev = crate::spd::kernels::sym_eigenvalues(s);
    let top = ev.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let tol = top * s.nrows() as f64 * f64::EPSILON;
    ev.iter().filter(|v| **v > tol).count()
}

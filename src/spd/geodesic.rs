//! Exponential and logarithm maps and geodesics of the affine-invariant metric.
//!
//! With any factor `A = W Wᵀ` (we use Cholesky):
//! `Log_A(B) = W log(W⁻¹ B W⁻ᵀ) Wᵀ`, `Exp_A(V) = W exp(W⁻¹ V W⁻ᵀ) Wᵀ`, and the
//! geodesic `A #_t B = W (W⁻¹ B W⁻ᵀ)^t Wᵀ` (Bhatia 2007, ch. 6). The result
//! does not depend on the factor because `W = A^{1/2} Q` with `Q` orthogonal.

use super::kernels::{cholesky, sym_eigen, whiten};
use super::{Mat, symmetrize};

fn factor(a: &Mat) -> Mat {
    cholesky(a).unwrap_or_else(|| Mat::from_element(a.nrows(), a.ncols(), f64::NAN))
}

fn congruence(w: &Mat, m: &Mat) -> Mat {
    symmetrize(&(w * m * w.transpose()))
}

/// Riemannian logarithm `Log_A(B)`, a symmetric tangent vector at `A`.
pub fn log_map(a: &Mat, b: &Mat) -> Mat {
    let w = factor(a);
    congruence(&w, &sym_eigen(&whiten(&w, b)).apply(f64::ln))
}

/// Riemannian exponential `Exp_A(V)` of a symmetric `V` at `A`.
pub fn exp_map(a: &Mat, v: &Mat) -> Mat {
    let w = factor(a);
    congruence(&w, &sym_eigen(&whiten(&w, v)).apply(f64::exp))
}

/// Point at parameter `t` on the geodesic from `A` (t = 0) to `B` (t = 1).
pub fn geodesic(a: &Mat, b: &Mat, t: f64) -> Mat {
    let w = factor(a);
    congruence(&w, &sym_eigen(&whiten(&w, b)).apply(|v| v.powf(t)))
}

/// Geometric mean of two matrices `A # B`, the geodesic midpoint.
pub fn two_point_mean(a: &Mat, b: &Mat) -> Mat {
    geodesic(a, b, 0.5)
}

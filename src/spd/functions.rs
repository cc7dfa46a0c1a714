//! Eigen-based matrix functions of symmetric (positive definite) matrices.
//!
//! `f(A) = U diag(f(λ)) Uᵀ` with `A = U diag(λ) Uᵀ`. This is exact in exact
//! arithmetic for any symmetric `A`; in floating point the eigenvalues carry an
//! absolute error of about `ε‖A‖`, so the relative accuracy of `f` at the small
//! end of the spectrum degrades like `ε·κ(A)` — the same limit any method that
//! starts from the rounded entries of `A` has (Higham 2008, *Functions of
//! Matrices*, §6 and §11 discuss the conditioning of sqrt and log).

use super::Mat;
use super::kernels::sym_eigen;

/// Principal square root of an SPD matrix.
pub fn sqrtm_spd(a: &Mat) -> Mat {
    sym_eigen(a).apply(|v| v.max(0.0).sqrt())
}

/// Inverse principal square root of an SPD matrix.
pub fn invsqrtm_spd(a: &Mat) -> Mat {
    sym_eigen(a).apply(|v| 1.0 / v.sqrt())
}

/// Principal logarithm of an SPD matrix.
pub fn logm_spd(a: &Mat) -> Mat {
    sym_eigen(a).apply(f64::ln)
}

/// Exponential of a symmetric matrix (always SPD).
pub fn expm_sym(a: &Mat) -> Mat {
    sym_eigen(a).apply(f64::exp)
}

/// Real power `A^t` of an SPD matrix.
pub fn powm_spd(a: &Mat, t: f64) -> Mat {
    sym_eigen(a).apply(|v| v.powf(t))
}

/// Inverse of an SPD matrix through its eigendecomposition (symmetric result).
pub fn inv_spd(a: &Mat) -> Mat {
    sym_eigen(a).apply(|v| 1.0 / v)
}

//! Geometry of symmetric positive definite (SPD) matrices.
//!
//! Everything here works on dense `p×p` matrices ([`Mat`]) and follows the
//! conventions in docs/methods.md: the affine-invariant metric, factors
//! `A = L Lᵀ` used in place of `A^{1/2}` wherever the result does not depend
//! on the choice, and eigen-based matrix functions for the rest.
//!
//! - [`kernels`]: the three dense kernels everything else is built from
//!   (Cholesky, whitening `L⁻¹ C L⁻ᵀ`, symmetric eigendecomposition);
//! - [`functions`]: matrix functions (sqrt, inverse sqrt, log, exp, powers);
//! - [`distance`]: affine-invariant and log-Euclidean distances;
//! - [`geodesic`]: exponential/logarithm maps and geodesic interpolation;
//! - [`validate`]: the symmetry and definiteness checks used on input;
//! - [`wishart`]: the short-window scale bias of Riemannian means.

pub mod distance;
pub mod functions;
pub mod geodesic;
pub mod kernels;
pub mod nearest;
pub mod validate;
pub mod wishart;

pub use distance::{airm_distance, log_euclidean_distance};
pub use functions::{expm_sym, invsqrtm_spd, logm_spd, powm_spd, sqrtm_spd};
pub use geodesic::{exp_map, geodesic, log_map, two_point_mean};
pub use kernels::{SymEigen, cholesky, sym_eigen, whiten};

/// The dense matrix type used throughout lacuna (column-major, `f64`).
pub type Mat = nalgebra::DMatrix<f64>;

/// Returns `(A + Aᵀ)/2`.
pub fn symmetrize(a: &Mat) -> Mat {
    let n = a.nrows();
    Mat::from_fn(n, n, |i, j| 0.5 * (a[(i, j)] + a[(j, i)]))
}

/// The block of `m` on rows and columns `o` (in that order): the one helper
/// for taking a trial's observed block, or a mean's block on some channels.
pub fn sub_block(m: &Mat, o: &[usize]) -> Mat {
    Mat::from_fn(o.len(), o.len(), |a, b| m[(o[a], o[b])])
}

/// Natural logarithm of the determinant of an SPD matrix (via Cholesky).
pub fn log_det(a: &Mat) -> Option<f64> {
    let l = cholesky(a)?;
    Some((0..a.nrows()).map(|i| 2.0 * l[(i, i)].ln()).sum())
}

/// 2-norm condition number of an SPD matrix (largest over smallest eigenvalue).
pub fn condition_number(a: &Mat) -> f64 {
    let e = sym_eigen(a);
    let lo = e.values.first().copied().unwrap_or(1.0);
    let hi = e.values.last().copied().unwrap_or(1.0);
    if lo <= 0.0 { f64::INFINITY } else { hi / lo }
}

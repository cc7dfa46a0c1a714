//! Distances between SPD matrices.
//!
//! Affine-invariant (AIRM): `δ(A,B) = ‖log(A^{-1/2} B A^{-1/2})‖_F`, computed as
//! `sqrt(Σ log² λ_k)` with `λ_k` the eigenvalues of `L⁻¹ B L⁻ᵀ`, `A = L Lᵀ`
//! (Pennec, Fillard, Ayache 2006; Bhatia 2007, ch. 6). Log-Euclidean:
//! `‖log A − log B‖_F` (Arsigny, Fillard, Pennec, Ayache 2007).

use super::Mat;
use super::functions::logm_spd;
use super::kernels::{cholesky, sym_eigenvalues, whiten};

/// Affine-invariant Riemannian distance. Returns NaN if `A` is not positive
/// definite (callers validate their inputs first).
pub fn airm_distance(a: &Mat, b: &Mat) -> f64 {
    match cholesky(a) {
        Some(l) => airm_distance_with_factor(&l, b),
        None => f64::NAN,
    }
}

/// Affine-invariant distance when the Cholesky factor of the first argument is
/// already known (saves a factorisation in loops over trials).
pub fn airm_distance_with_factor(l: &Mat, b: &Mat) -> f64 {
    let m = whiten(l, b);
    sym_eigenvalues(&m)
        .iter()
        .map(|v| v.ln().powi(2))
        .sum::<f64>()
        .sqrt()
}

/// Log-Euclidean distance `‖log A − log B‖_F`.
pub fn log_euclidean_distance(a: &Mat, b: &Mat) -> f64 {
    (logm_spd(a) - logm_spd(b)).norm()
}

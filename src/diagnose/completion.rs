//! Maximum-determinant positive-definite completion of free entries.
//!
//! Given an SPD matrix `X` whose entries on a set of free pairs are not pinned
//! by the data, replace those entries by the values that maximise `log det X`
//! while keeping every pinned entry. The maximiser exists and is unique when
//! some PD completion exists (here `X` itself is one) and is characterised by
//! `(X⁻¹)[a,b] = 0` on every free pair (Dempster 1972, "Covariance selection",
//! Biometrics; Grone, Johnson, Sá, Wolkowicz 1984, Linear Algebra Appl.). It is
//! the completion that adds the least information: the Gaussian with these
//! pinned covariances and maximum entropy.
//!
//! Method: Newton's method on the free entries, with gradient
//! `∂ log det / ∂x_ab = 2 S_ab` and Hessian `−2 (S_ac S_bd + S_ad S_bc)`,
//! `S = X⁻¹`, and step halving to stay positive definite and increase `log det`.

use nalgebra::{DMatrix, DVector};

use crate::spd::functions::inv_spd;
use crate::spd::{Mat, log_det, symmetrize};

/// Outcome of a completion.
#[derive(Debug, Clone)]
pub struct Completion {
    /// The completed matrix.
    pub matrix: Mat,
    /// Newton iterations used.
    pub iterations: usize,
    /// Largest `|(X⁻¹)[a,b]|·sqrt(X_aa X_bb)` left on a free pair (scale-free optimality residual).
    pub residual: f64,
}

/// Fills the `free` pairs of `x` by the maximum-determinant rule.
pub fn max_det_completion(x: &Mat, free: &[[usize; 2]]) -> Completion {
    let mut x = symmetrize(x);
    if free.is_empty() {
        return Completion {
            matrix: x,
            iterations: 0,
            residual: 0.0,
        };
    }
    let m = free.len();
    let residual = |x: &Mat, s: &Mat| {
        free.iter()
            .map(|&[a, b]| s[(a, b)].abs() * (x[(a, a)] * x[(b, b)]).sqrt())
            .fold(0.0, f64::max)
    };
    let mut iterations = 0;
    let mut s = inv_spd(&x);
    let mut ld = log_det(&x).unwrap_or(f64::NEG_INFINITY);
    for _ in 0..100 {
        if residual(&x, &s) <= 1e-13 {
            break;
        }
        iterations += 1;
        let g = DVector::from_fn(m, |k, _| 2.0 * s[(free[k][0], free[k][1])]);
        let h = DMatrix::from_fn(m, m, |k, l| {
            let ([a, b], [c, d]) = (free[k], free[l]);
            2.0 * (s[(a, c)] * s[(b, d)] + s[(a, d)] * s[(b, c)])
        });
        // Newton step for a concave function: solve (−H) Δ = g with −H = h SPD.
        let Some(chol) = h.cholesky() else { break };
        let delta = chol.solve(&g);
        let mut t = 1.0;
        let mut improved = false;
        for _ in 0..50 {
            let mut trial = x.clone();
            for (k, &[a, b]) in free.iter().enumerate() {
                trial[(a, b)] += t * delta[k];
                trial[(b, a)] += t * delta[k];
            }
            if let Some(l) = log_det(&trial)
                && l >= ld - 1e-14 * ld.abs()
            {
                x = trial;
                ld = l;
                improved = true;
                break;
            }
            t *= 0.5;
        }
        s = inv_spd(&x);
        if !improved {
            break;
        }
    }
    let residual = residual(&x, &s);
    Completion {
        matrix: x,
        iterations,
        residual,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Dempster 1972 / Grone et al. 1984: at the max-det completion the inverse
    // vanishes on the free entries; pinned entries are unchanged. For a 3×3
    // with X[0,2] free, the closed form is X02 = X01·X12/X11 (from memory:
    // the Markov-chain completion; it zeroes (X⁻¹)[0,2]).
    #[test]
    fn tridiagonal_pattern_closed_form() {
        let x = Mat::from_row_slice(3, 3, &[2.0, 0.6, -0.4, 0.6, 1.5, 0.3, -0.4, 0.3, 1.0]);
        let c = max_det_completion(&x, &[[0, 2]]);
        let expected = 0.6 * 0.3 / 1.5;
        assert!(
            (c.matrix[(0, 2)] - expected).abs() < 1e-12,
            "{}",
            c.matrix[(0, 2)]
        );
        assert!((c.matrix[(0, 1)] - 0.6).abs() == 0.0);
        let s = inv_spd(&c.matrix);
        assert!(s[(0, 2)].abs() < 1e-12);
    }
}

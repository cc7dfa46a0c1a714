//! The dense kernels: Cholesky factor, whitening and symmetric eigensolver.
//!
//! They are the floor of every iteration in lacuna (one whitening and one
//! eigendecomposition per trial), so they are chosen by measurement (see
//! docs/performance.md): faer for Cholesky and triangular solves at every size,
//! and for the eigendecomposition above [`EIGEN_FAER_FROM`] channels; nalgebra's
//! eigensolver below that, where it was faster on this machine.
//!
//! Numerical contract: inputs are symmetric (only the lower triangle is
//! read by the faer paths); outputs are symmetric to rounding and are
//! symmetrised explicitly where a caller relies on exact symmetry.

use super::Mat;
use faer::{Accum, MatRef, Par, Side};

/// From this many channels on, the eigendecomposition goes through faer.
pub const EIGEN_FAER_FROM: usize = 56;

/// From this many channels on, eigenvalues alone go through faer (measured
/// with `lacuna-bench --mode kernels`: at 48 channels faer 129 µs against
/// nalgebra 157 µs, at 32 nalgebra 43 µs against 60 µs).
pub const EIGENVALUES_FAER_FROM: usize = 40;

fn view(a: &Mat) -> MatRef<'_, f64> {
    MatRef::from_column_major_slice(a.as_slice(), a.nrows(), a.ncols())
}

fn to_mat(a: MatRef<'_, f64>) -> Mat {
    Mat::from_fn(a.nrows(), a.ncols(), |i, j| a[(i, j)])
}

/// Lower Cholesky factor `L` with `A = L Lᵀ`, or `None` if `A` is not
/// (numerically) positive definite. Reads the lower triangle of `A`.
pub fn cholesky(a: &Mat) -> Option<Mat> {
    let n = a.nrows();
    if n == 0 {
        return Some(Mat::zeros(0, 0));
    }
    let llt = view(a).llt(Side::Lower).ok()?;
    let l = llt.L();
    let mut out = Mat::zeros(n, n);
    for j in 0..n {
        for i in j..n {
            out[(i, j)] = l[(i, j)];
        }
    }
    if out.iter().all(|v| v.is_finite()) {
        Some(out)
    } else {
        None
    }
}

/// Solves `L Y = B` in place for lower-triangular `L` (`B` becomes `L⁻¹ B`).
pub fn solve_lower_in_place(l: &Mat, b: &mut Mat) {
    let (r, c) = (b.nrows(), b.ncols());
    let rhs = faer::MatMut::from_column_major_slice_mut(b.as_mut_slice(), r, c);
    view(l).solve_lower_triangular_in_place(rhs);
}

/// Solves `Lᵀ Y = B` in place for lower-triangular `L` (`B` becomes `L⁻ᵀ B`).
pub fn solve_lower_transpose_in_place(l: &Mat, b: &mut Mat) {
    let (r, c) = (b.nrows(), b.ncols());
    let rhs = faer::MatMut::from_column_major_slice_mut(b.as_mut_slice(), r, c);
    view(l).transpose().solve_upper_triangular_in_place(rhs);
}

/// Whitening `L⁻¹ C L⁻ᵀ` of a symmetric `C` by a lower-triangular factor `L`.
/// The result is symmetrised.
pub fn whiten(l: &Mat, c: &Mat) -> Mat {
    let mut y = c.clone();
    solve_lower_in_place(l, &mut y); // L⁻¹ C
    y.transpose_mut(); // (L⁻¹ C)ᵀ = C L⁻ᵀ
    solve_lower_in_place(l, &mut y); // L⁻¹ C L⁻ᵀ
    let n = y.nrows();
    for j in 0..n {
        for i in (j + 1)..n {
            let m = 0.5 * (y[(i, j)] + y[(j, i)]);
            y[(i, j)] = m;
            y[(j, i)] = m;
        }
    }
    y
}

/// Eigendecomposition `A = U diag(values) Uᵀ` of a symmetric matrix, with
/// eigenvalues in nondecreasing order.
#[derive(Debug, Clone)]
pub struct SymEigen {
    /// Eigenvalues, nondecreasing.
    pub values: Vec<f64>,
    /// Orthonormal eigenvectors as columns.
    pub vectors: Mat,
}

impl SymEigen {
    /// Rebuilds `U diag(f(λ)) Uᵀ` for a scalar function `f`.
    pub fn apply(&self, f: impl Fn(f64) -> f64) -> Mat {
        let fv: Vec<f64> = self.values.iter().map(|&v| f(v)).collect();
        rebuild(&self.vectors, &fv)
    }
}

/// `U diag(d) Uᵀ`, exactly symmetric.
pub fn rebuild(u: &Mat, d: &[f64]) -> Mat {
    let n = u.nrows();
    let mut scaled = u.clone();
    for (j, &dj) in d.iter().enumerate() {
        scaled.column_mut(j).scale_mut(dj);
    }
    let mut out = &scaled * u.transpose();
    for j in 0..n {
        for i in (j + 1)..n {
            let m = 0.5 * (out[(i, j)] + out[(j, i)]);
            out[(i, j)] = m;
            out[(j, i)] = m;
        }
    }
    out
}

/// `acc += U diag(d) Uᵀ`, one matrix product (faer, no transpose copy).
/// The result is symmetric to rounding; callers symmetrise once at the end.
pub fn add_rebuild(acc: &mut Mat, u: &Mat, d: &[f64]) {
    let mut scaled = u.clone();
    for (j, &dj) in d.iter().enumerate() {
        scaled.column_mut(j).scale_mut(dj);
    }
    let n = acc.nrows();
    let dst = faer::MatMut::from_column_major_slice_mut(acc.as_mut_slice(), n, n);
    faer::linalg::matmul::matmul(
        dst,
        Accum::Add,
        view(&scaled),
        view(u).transpose(),
        1.0,
        Par::Seq,
    );
}

/// `acc += alpha · Qᵀ B Q` for `Q` of size `k×p` and symmetric `B` (`k×k`).
pub fn add_congruence_t(acc: &mut Mat, q: &Mat, b: &Mat, alpha: f64) {
    let (k, p) = (q.nrows(), q.ncols());
    let mut bq = Mat::zeros(k, p);
    let bq_view = faer::MatMut::from_column_major_slice_mut(bq.as_mut_slice(), k, p);
    faer::linalg::matmul::matmul(bq_view, Accum::Replace, view(b), view(q), 1.0, Par::Seq);
    let dst = faer::MatMut::from_column_major_slice_mut(acc.as_mut_slice(), p, p);
    faer::linalg::matmul::matmul(
        dst,
        Accum::Add,
        view(q).transpose(),
        view(&bq),
        alpha,
        Par::Seq,
    );
}

/// Symmetric eigendecomposition (values nondecreasing).
///
/// # Panics
/// Never on finite input; non-finite input yields NaN values, which callers
/// treat as a numerical failure.
pub fn sym_eigen(a: &Mat) -> SymEigen {
    let n = a.nrows();
    if n >= EIGEN_FAER_FROM
        && let Ok(evd) = view(a).self_adjoint_eigen(Side::Lower)
    {
        let s = evd.S();
        let values: Vec<f64> = (0..n).map(|i| s.column_vector()[i]).collect();
        return SymEigen {
            values,
            vectors: to_mat(evd.U()),
        };
    }
    let e = nalgebra::SymmetricEigen::new(a.clone());
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&i, &j| e.eigenvalues[i].total_cmp(&e.eigenvalues[j]));
    let values = order.iter().map(|&i| e.eigenvalues[i]).collect();
    let vectors = Mat::from_fn(n, n, |r, c| e.eigenvectors[(r, order[c])]);
    SymEigen { values, vectors }
}

/// Eigenvalues only (nondecreasing): no eigenvectors are formed, which
/// saves about 40 % of [`sym_eigen`] at 32 channels.
pub fn sym_eigenvalues(a: &Mat) -> Vec<f64> {
    let n = a.nrows();
    if n >= EIGENVALUES_FAER_FROM
        && let Ok(v) = view(a).self_adjoint_eigenvalues(Side::Lower)
    {
        return v;
    }
    let mut v: Vec<f64> = a.clone().symmetric_eigenvalues().iter().copied().collect();
    v.sort_by(f64::total_cmp);
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: L Lᵀ reproduces A, and U diag(λ) Uᵀ reproduces A.
    #[test]
    fn factorizations_reproduce_input() {
        for &n in &[3usize, 12, 45] {
            let b = Mat::from_fn(n, n, |i, j| ((i * 7 + j * 3) % 11) as f64 / 11.0 - 0.4);
            let a = &b * b.transpose() + Mat::identity(n, n) * 0.5;
            let l = cholesky(&a).unwrap();
            assert!((&l * l.transpose() - &a).norm() < 1e-12 * a.norm());
            let e = sym_eigen(&a);
            assert!(e.values.windows(2).all(|w| w[0] <= w[1]));
            assert!((e.apply(|v| v) - &a).norm() < 1e-12 * a.norm());
            let w = whiten(&l, &a);
            assert!((w - Mat::identity(n, n)).norm() < 1e-12 * n as f64);
        }
    }

    #[test]
    fn cholesky_refuses_indefinite() {
        let a = Mat::from_row_slice(2, 2, &[1.0, 2.0, 2.0, 1.0]);
        assert!(cholesky(&a).is_none());
    }
}

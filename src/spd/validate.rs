//! Input checks for symmetric positive definite blocks (GUIDE §3).
//!
//! Symmetry to a relative tolerance `‖A−Aᵀ‖_F ≤ 1e-10·‖A‖_F` (then the caller
//! symmetrises), finiteness, and definiteness by an unpivoted Cholesky that
//! reports the first pivot that fails — which names the channel at fault.

use super::Mat;

/// Relative symmetry tolerance applied to every input block.
pub const SYMMETRY_TOL: f64 = 1e-10;

/// Why a block is not a valid SPD matrix, with 0-based local indices.
#[derive(Debug, Clone, PartialEq)]
pub enum SpdDefect {
    /// Entry `(row, col)` is NaN or infinite.
    NonFinite { row: usize, col: usize },
    /// Relative asymmetry above tolerance; `row` has the largest mismatch.
    NotSymmetric { relative: f64, row: usize },
    /// Cholesky broke down at pivot `row` (its leading block is not PD).
    NotPositiveDefinite { row: usize, pivot: f64 },
}

/// Checks a block; returns the first defect found.
pub fn check_spd(a: &Mat) -> Result<(), SpdDefect> {
    let n = a.nrows();
    for j in 0..n {
        for i in 0..n {
            if !a[(i, j)].is_finite() {
                return Err(SpdDefect::NonFinite { row: i, col: j });
            }
        }
    }
    let asym = (a - a.transpose()).norm();
    let scale = a.norm();
    if asym > SYMMETRY_TOL * scale {
        let row = (0..n)
            .max_by(|&r, &s| {
                let dr = (a.row(r) - a.column(r).transpose()).norm();
                let ds = (a.row(s) - a.column(s).transpose()).norm();
                dr.total_cmp(&ds)
            })
            .unwrap_or(0);
        return Err(SpdDefect::NotSymmetric {
            relative: asym / scale,
            row,
        });
    }
    // Unpivoted Cholesky on the symmetrised block; the failing pivot's
    // index is the first channel whose addition makes the block singular.
    let mut l = Mat::zeros(n, n);
    for j in 0..n {
        let mut d = 0.5 * (a[(j, j)] + a[(j, j)]);
        for k in 0..j {
            d -= l[(j, k)] * l[(j, k)];
        }
        // Relative floor: a pivot this small is zero at double precision.
        let floor = 1e-14 * a[(j, j)].abs().max(f64::MIN_POSITIVE);
        if !(d > floor) {
            return Err(SpdDefect::NotPositiveDefinite { row: j, pivot: d });
        }
        let djj = d.sqrt();
        l[(j, j)] = djj;
        for i in (j + 1)..n {
            let mut s = 0.5 * (a[(i, j)] + a[(j, i)]);
            for k in 0..j {
                s -= l[(i, k)] * l[(j, k)];
            }
            l[(i, j)] = s / djj;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: each defect is detected at the right index.
    #[test]
    fn finds_each_defect() {
        let good = Mat::from_row_slice(3, 3, &[2.0, 0.5, 0.0, 0.5, 2.0, 0.1, 0.0, 0.1, 1.0]);
        assert_eq!(check_spd(&good), Ok(()));
        let mut nan = good.clone();
        nan[(2, 1)] = f64::NAN;
        assert_eq!(
            check_spd(&nan),
            Err(SpdDefect::NonFinite { row: 2, col: 1 })
        );
        let mut asym = good.clone();
        asym[(0, 2)] = 0.3;
        assert!(matches!(
            check_spd(&asym),
            Err(SpdDefect::NotSymmetric { .. })
        ));
        // Channel 2 duplicates channel 1: Cholesky breaks at pivot 1.
        let sing = Mat::from_row_slice(3, 3, &[1.0, 1.0, 0.0, 1.0, 1.0, 0.0, 0.0, 0.0, 1.0]);
        assert!(matches!(
            check_spd(&sing),
            Err(SpdDefect::NotPositiveDefinite { row: 1, .. })
        ));
    }
}

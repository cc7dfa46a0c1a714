//! Helpers shared by the integration tests.
#![allow(dead_code)]

use lacuna::Mat;
use lacuna::simulate::rng::Rng;

/// Reads a fixture written by tests/reference/make_fixtures.py.
pub fn fixture(name: &str) -> serde_json::Value {
    let path = format!(
        "{}/tests/reference/fixtures/{name}.json",
        env!("CARGO_MANIFEST_DIR")
    );
    serde_json::from_str(&std::fs::read_to_string(&path).expect("fixture file"))
        .expect("fixture JSON")
}

/// A JSON list of lists as a matrix.
pub fn mat(v: &serde_json::Value) -> Mat {
    let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).expect("matrix");
    let n = rows.len();
    let m = rows.first().map_or(0, Vec::len);
    Mat::from_fn(n, m, |i, j| rows[i][j])
}

/// Relative Frobenius error.
pub fn rel_err(a: &Mat, b: &Mat) -> f64 {
    (a - b).norm() / b.norm()
}

/// An SPD matrix from a seed (random eigenvectors, log-spaced spectrum).
pub fn spd(p: usize, cond: f64, seed: u64) -> Mat {
    lacuna::simulate::stacks::random_spd(p, cond, &mut Rng::new(seed))
}

/// True when `a − b` is positive semidefinite up to `tol` relative to ‖a‖.
pub fn loewner_geq(a: &Mat, b: &Mat, tol: f64) -> bool {
    let d = lacuna::spd::kernels::sym_eigenvalues(&lacuna::spd::symmetrize(&(a - b)));
    d[0] >= -tol * a.norm()
}

//! SPD geometry against closed forms and numpy/scipy reference values.

mod common;

use common::{fixture, mat, rel_err, spd};
use lacuna::spd::{
    Mat, airm_distance, exp_map, expm_sym, geodesic, log_euclidean_distance, log_map, logm_spd,
    sqrtm_spd, two_point_mean,
};
use proptest::prelude::*;

// Bhatia 2007, Positive Definite Matrices, ch. 4: for 2×2 matrices of
// determinant one, A # B = (A + B)/sqrt(det(A + B)); e.g. [[2,1],[1,1]] # I = [[3,1],[1,2]]/√5.
#[test]
fn two_by_two_determinant_one_closed_form() {
    let a = Mat::from_row_slice(2, 2, &[2.0, 1.0, 1.0, 1.0]);
    let g = two_point_mean(&a, &Mat::identity(2, 2));
    let expected = Mat::from_row_slice(2, 2, &[3.0, 1.0, 1.0, 2.0]) / 5f64.sqrt();
    assert!((g - expected).norm() < 1e-14);
}

// Bhatia 2007, ch. 4: A # B = A^{1/2} (A^{-1/2} B A^{-1/2})^{1/2} A^{1/2}, and it is the
// unique SPD solution of X A⁻¹ X = B (the Riccati characterisation).
#[test]
fn two_point_mean_matches_square_root_formula_and_riccati() {
    for (p, seed) in [(3, 1), (8, 2), (20, 3)] {
        let a = spd(p, 1e3, seed);
        let b = spd(p, 1e3, seed + 100);
        let g = two_point_mean(&a, &b);
        let ah = sqrtm_spd(&a);
        let ahi = ah.clone().try_inverse().unwrap();
        let formula = &ah * sqrtm_spd(&lacuna::spd::symmetrize(&(&ahi * &b * &ahi))) * &ah;
        assert!(rel_err(&g, &formula) < 1e-10, "p={p}");
        let riccati = &g * a.clone().try_inverse().unwrap() * &g;
        assert!(rel_err(&riccati, &b) < 1e-9, "p={p}");
        // Midpoint: equal distance to both ends, half the total.
        let d = airm_distance(&a, &b);
        assert!((airm_distance(&a, &g) - d / 2.0).abs() < 1e-10 * d.max(1.0));
        assert!((airm_distance(&g, &b) - d / 2.0).abs() < 1e-10 * d.max(1.0));
    }
}

// Closed form: δ(I, diag(e, 1/e)) = sqrt(1² + (−1)²) = √2 (common practice, no source).
#[test]
fn distance_closed_form() {
    let e = std::f64::consts::E;
    let d = airm_distance(
        &Mat::identity(2, 2),
        &Mat::from_diagonal(&nalgebra::DVector::from_vec(vec![e, 1.0 / e])),
    );
    assert!((d - 2f64.sqrt()).abs() < 1e-15);
}

// scipy.linalg.logm / sqrtm / expm and scipy.linalg.eigh(B, A) fixtures (make_fixtures.py,
// numpy 2.1.3, scipy 1.14.1). Tolerances scale with κ·ε: at κ = 1e8 the small eigenvalues
// of the inputs are only known to about 1e-8 relative.
#[test]
fn matrix_functions_match_scipy() {
    let f = fixture("matrix_functions");
    for case in f["cases"].as_array().unwrap() {
        let cond = case["cond"].as_f64().unwrap();
        let p = case["p"].as_u64().unwrap();
        let (a, b, s) = (mat(&case["a"]), mat(&case["b"]), mat(&case["s"]));
        let tol = (cond * 1e-15).max(1e-12);
        assert!(
            rel_err(&logm_spd(&a), &mat(&case["logm_a"])) < tol,
            "logm p={p}"
        );
        assert!(
            rel_err(&sqrtm_spd(&a), &mat(&case["sqrtm_a"])) < tol,
            "sqrtm p={p}"
        );
        assert!(
            rel_err(&expm_sym(&s), &mat(&case["expm_s"])) < 1e-12,
            "expm p={p}"
        );
        let d = airm_distance(&a, &b);
        let dref = case["airm_ab"].as_f64().unwrap();
        assert!((d - dref).abs() < tol * dref, "airm p={p}: {d} vs {dref}");
        let le = log_euclidean_distance(&a, &b);
        let leref = case["logeuclid_ab"].as_f64().unwrap();
        assert!((le - leref).abs() < tol * leref, "log-euclidean p={p}");
    }
}

// Bhatia 2007, ch. 6: Exp_A(Log_A(B)) = B, and A #_t B at t = 0, 1 gives the endpoints.
#[test]
fn exp_log_maps_invert_each_other() {
    let a = spd(10, 1e4, 7);
    let b = spd(10, 1e4, 8);
    let v = log_map(&a, &b);
    assert!(rel_err(&exp_map(&a, &v), &b) < 1e-10);
    assert!(rel_err(&geodesic(&a, &b, 0.0), &a) < 1e-12);
    assert!(rel_err(&geodesic(&a, &b, 1.0), &b) < 1e-10);
    // ‖Log_A(B)‖_A = δ(A, B) (Pennec, Fillard, Ayache 2006).
    let ahi = lacuna::spd::invsqrtm_spd(&a);
    let nv = (&ahi * &v * &ahi).norm();
    assert!((nv - airm_distance(&a, &b)).abs() < 1e-10 * nv);
}

fn arb_spd(p: usize) -> impl Strategy<Value = Mat> {
    (any::<u64>(), 1.0f64..1e3).prop_map(move |(seed, cond)| spd(p, cond, seed))
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    // Pennec, Fillard, Ayache 2006: δ is symmetric and invariant under congruence
    // and under inversion.
    #[test]
    fn distance_invariances(a in arb_spd(6), b in arb_spd(6), seed in any::<u64>()) {
        let d = airm_distance(&a, &b);
        prop_assert!((d - airm_distance(&b, &a)).abs() <= 1e-8 * d.max(1.0));
        let mut rng = lacuna::simulate::rng::Rng::new(seed);
        let w = lacuna::simulate::stacks::gaussian(6, 6, &mut rng) + Mat::identity(6, 6) * 3.0;
        let (wa, wb) = (&w * &a * w.transpose(), &w * &b * w.transpose());
        prop_assert!((d - airm_distance(&wa, &wb)).abs() <= 1e-7 * d.max(1.0));
        let (ai, bi) = (lacuna::spd::functions::inv_spd(&a), lacuna::spd::functions::inv_spd(&b));
        prop_assert!((d - airm_distance(&ai, &bi)).abs() <= 1e-7 * d.max(1.0));
    }

    // Common practice, no source: exp(log A) = A, and matrix functions keep symmetry
    // and definiteness.
    #[test]
    fn exp_of_log_is_identity(a in arb_spd(7)) {
        let l = logm_spd(&a);
        prop_assert!((&l - l.transpose()).norm() == 0.0);
        let back = expm_sym(&l);
        prop_assert!(rel_err(&back, &a) < 1e-9);
        prop_assert!(lacuna::spd::cholesky(&sqrtm_spd(&a)).is_some());
    }
}

// Normwise accuracy at condition 1e12 (common practice, no source): with a known
// spectrum log-spaced on [1e-6, 1e6], exp(log A) and (A^{1/2})² reproduce A to 1e-12
// relative in Frobenius norm, and the largest eigenvalue of log A is log 1e6 to 1e-13.
// (The smallest eigenvalues are only known to about ε·κ relative, for any method.)
#[test]
fn matrix_functions_hold_at_condition_1e12() {
    let p = 12;
    let mut rng = lacuna::simulate::rng::Rng::new(12);
    let q = lacuna::simulate::stacks::random_orthogonal(p, &mut rng);
    let lam: Vec<f64> = (0..p)
        .map(|k| 10f64.powf(-6.0 + 12.0 * k as f64 / (p - 1) as f64))
        .collect();
    let a = lacuna::spd::symmetrize(
        &(&q * Mat::from_diagonal(&nalgebra::DVector::from_vec(lam.clone())) * q.transpose()),
    );
    assert!(rel_err(&expm_sym(&logm_spd(&a)), &a) < 1e-12);
    let s = sqrtm_spd(&a);
    assert!(rel_err(&(&s * &s), &a) < 1e-12);
    let top = *lacuna::spd::kernels::sym_eigenvalues(&logm_spd(&a))
        .last()
        .unwrap();
    assert!((top - 1e6f64.ln()).abs() < 1e-13 * 1e6f64.ln(), "{top}");
}

//! The alternative schemes added for side-by-side comparison: EM, spherical
//! splines, common channels, subspace compression, OAS-driven shrinkage.

mod common;

use common::{fixture, mat, rel_err, spd};
use lacuna::Mat;
use lacuna::schemes::{
    Arithmetic, CommonChannels, GaussianEm, Karcher, Shrinkage, SphericalSpline, Subspace,
    spline_interpolation_matrix,
};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, sample_covariance};
use lacuna::trials::{Trial, TrialSet};
use lacuna::{AveragingScheme, SchemeOptions};

fn set_from_fixture(case: &serde_json::Value) -> TrialSet {
    let p = case["p"].as_u64().unwrap() as usize;
    let trials = case["covs"]
        .as_array()
        .unwrap()
        .iter()
        .zip(case["observed"].as_array().unwrap())
        .map(|(c, o)| {
            let c = mat(c);
            let observed: Vec<usize> = serde_json::from_value(o.clone()).unwrap();
            let block = Mat::from_fn(observed.len(), observed.len(), |a, b| {
                c[(observed[a], observed[b])]
            });
            Trial { observed, block }
        })
        .collect();
    TrialSet::new(
        lacuna::trials::default_channel_names(p),
        trials,
        None,
        "fixture",
    )
    .unwrap()
}

// Source: tests/reference/make_scheme_fixtures.py maximises the observed-data
// Gaussian log-likelihood directly with scipy 1.14.1 L-BFGS-B (no EM); EM
// must reach the same maximiser (Dempster, Laird & Rubin 1977).
#[test]
fn em_matches_direct_likelihood_maximisation() {
    let fx = fixture("em");
    for case in fx["cases"].as_array().unwrap() {
        let set = set_from_fixture(case);
        assert!(!set.all_complete());
        let r = GaussianEm.average(&set, &SchemeOptions::default()).unwrap();
        assert!(r.diagnostics.converged, "{:?}", r.diagnostics.stop_reason);
        let ml = mat(&case["ml"]);
        let err = rel_err(&r.mean, &ml);
        assert!(err < 1e-6, "p = {}: relative error {err}", set.n_channels());
        // Same likelihood value (our cost is the fixture's nll × N / N, weights 1/N).
        let nll = case["nll"].as_f64().unwrap();
        assert!((r.diagnostics.cost.unwrap() - nll).abs() < 1e-9 * nll.abs().max(1.0));
    }
}

// Closed form: without missing channels the ML covariance of zero-mean data
// is the (weighted) average scatter, i.e. the arithmetic mean (textbook, from memory).
#[test]
fn em_without_missing_is_the_arithmetic_mean() {
    let mut rng = Rng::new(4);
    let sigma = spd(6, 30.0, 1);
    let mats: Vec<Mat> = (0..25)
        .map(|_| sample_covariance(&sigma, 40, &mut rng))
        .collect();
    let set = TrialSet::from_full(lacuna::trials::default_channel_names(6), mats, None).unwrap();
    let em = GaussianEm.average(&set, &SchemeOptions::default()).unwrap();
    let ar = Arithmetic.average(&set, &SchemeOptions::default()).unwrap();
    assert!(rel_err(&em.mean, &ar.mean) < 1e-12);
    assert!(em.diagnostics.converged);
}

// Source: a numpy implementation of Perrin et al. (1989)'s formulas
// (tests/reference/make_scheme_fixtures.py, scipy.special.eval_legendre).
#[test]
fn spherical_spline_matrix_matches_published_formulas() {
    let fx = fixture("spline");
    let pos: Vec<[f64; 3]> = serde_json::from_value(fx["positions"].clone()).unwrap();
    let from: Vec<usize> = serde_json::from_value(fx["from"].clone()).unwrap();
    let to: Vec<usize> = serde_json::from_value(fx["to"].clone()).unwrap();
    let w = spline_interpolation_matrix(&pos, &from, &to).unwrap();
    assert!(rel_err(&w, &mat(&fx["w"])) < 1e-10);
    for pair in fx["g_samples"].as_array().unwrap() {
        let (x, g) = (pair[0].as_f64().unwrap(), pair[1].as_f64().unwrap());
        assert!((lacuna::schemes::spherical_spline_g(x) - g).abs() < 1e-14);
    }
    // A constant potential is reproduced exactly (the c₀ term): rows sum to 1
    // (property of the formulation, common practice, no source).
    for r in 0..w.nrows() {
        assert!((w.row(r).sum() - 1.0).abs() < 1e-10);
    }
}

#[test]
fn spherical_spline_needs_positions_and_gives_spd() {
    let mut rng = Rng::new(9);
    let p = 8;
    let sigma = spd(p, 20.0, 2);
    let full: Vec<Mat> = (0..30)
        .map(|_| sample_covariance(&sigma, 50, &mut rng))
        .collect();
    let set = masked_set(&full, random_dropout(30, p, 0.5, 2, &mut rng));
    assert!(
        SphericalSpline
            .average(&set, &SchemeOptions::default())
            .is_err()
    );
    let pos: Vec<[f64; 3]> = (0..p)
        .map(|i| {
            let z = 1.0 - (i as f64 + 0.5) / p as f64 * 0.8;
            let r = (1.0 - z * z).sqrt();
            let phi = i as f64 * 2.4;
            [r * phi.cos(), r * phi.sin(), z]
        })
        .collect();
    let names = lacuna::trials::default_channel_names(p);
    let opts = SchemeOptions {
        positions: Some(std::sync::Arc::new(names.into_iter().zip(pos).collect())),
        ..SchemeOptions::default()
    };
    let r = SphericalSpline.average(&set, &opts).unwrap();
    assert!(lacuna::spd::cholesky(&r.mean).is_some());
    assert!(r.diagnostics.converged);
}

// common-channels equals the Karcher mean of the common block (by definition).
#[test]
fn common_channels_is_karcher_on_the_common_block() {
    let mut rng = Rng::new(5);
    let p = 6;
    let sigma = spd(p, 10.0, 3);
    let full: Vec<Mat> = (0..20)
        .map(|_| sample_covariance(&sigma, 30, &mut rng))
        .collect();
    // Channels 4 and 5 are lost in some trials; 0–3 are always observed.
    let obs: Vec<Vec<usize>> = (0..20)
        .map(|i| {
            if i % 3 == 0 {
                vec![0, 1, 2, 3]
            } else if i % 3 == 1 {
                vec![0, 1, 2, 3, 5]
            } else {
                (0..6).collect()
            }
        })
        .collect();
    let set = masked_set(&full, obs);
    let r = CommonChannels
        .average(&set, &SchemeOptions::default())
        .unwrap();
    assert_eq!(r.diagnostics.estimated_channels, Some(vec![0, 1, 2, 3]));
    let block: Vec<Mat> = full
        .iter()
        .map(|m| m.view((0, 0), (4, 4)).into_owned())
        .collect();
    let k = Karcher
        .average(
            &TrialSet::from_full(lacuna::trials::default_channel_names(4), block, None).unwrap(),
            &SchemeOptions::default(),
        )
        .unwrap();
    assert!(rel_err(&r.mean.view((0, 0), (4, 4)).into_owned(), &k.mean) < 1e-12);
}

// With complete trials and full rank, compression is an orthogonal congruence,
// under which the Karcher mean is equivariant (Bhatia 2007, Positive Definite
// Matrices, ch. 6): subspace = Karcher.
#[test]
fn subspace_at_full_rank_is_karcher() {
    let mut rng = Rng::new(6);
    let p = 7;
    let sigma = spd(p, 50.0, 4);
    let mats: Vec<Mat> = (0..30)
        .map(|_| sample_covariance(&sigma, 40, &mut rng))
        .collect();
    let set = TrialSet::from_full(lacuna::trials::default_channel_names(p), mats, None).unwrap();
    let opts = SchemeOptions {
        rank: Some(p),
        ..SchemeOptions::default()
    };
    let s = Subspace.average(&set, &opts).unwrap();
    let k = Karcher.average(&set, &SchemeOptions::default()).unwrap();
    assert!(lacuna::spd::distance::airm_distance(&s.mean, &k.mean) < 1e-8);
    // The default rule picks a smaller rank and still returns an SPD mean.
    let d = Subspace.average(&set, &SchemeOptions::default()).unwrap();
    assert!(lacuna::spd::cholesky(&d.mean).is_some());
}

// OAS intensity from a covariance and its sample count equals the intensity
// the OAS estimator computes from the samples (same formula, Chen et al. 2010).
#[test]
fn shrinkage_with_samples_uses_oas_intensity() {
    let mut rng = Rng::new(8);
    let x = Mat::from_fn(5, 40, |_, _| rng.normal());
    let est = lacuna::ingest::covariance::estimate(&x, lacuna::ingest::covariance::Estimator::Oas);
    let moments = lacuna::ingest::covariance::Moments::of(&x, false);
    let rho = lacuna::ingest::covariance::oas_intensity(&moments.s1, 40);
    assert!((rho - est.shrinkage).abs() < 1e-14);
    let set = TrialSet::from_full(
        lacuna::trials::default_channel_names(5),
        vec![moments.s1.clone(); 3],
        None,
    )
    .unwrap();
    let opts = SchemeOptions {
        samples: Some(40),
        ..SchemeOptions::default()
    };
    let r = Shrinkage.average(&set, &opts).unwrap();
    // Identical trials: the Karcher mean is the shrunk trial itself.
    let mu = moments.s1.trace() / 5.0;
    let want = &moments.s1 * (1.0 - rho) + Mat::identity(5, 5) * (rho * mu);
    assert!(rel_err(&r.mean, &want) < 1e-10);
}

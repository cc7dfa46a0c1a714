//! The masked Riemannian mean (`airm-observed`).

mod common;

use common::{fixture, mat, spd};
use lacuna::diagnose::identifiability;
use lacuna::schemes::{AirmObserved, InitRule, Karcher, MaskedKarcherProblem};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, sample_covariance};
use lacuna::spd::functions::inv_spd;
use lacuna::spd::{Mat, airm_distance};
use lacuna::trials::{Trial, TrialSet, default_channel_names};
use lacuna::{AveragingScheme, SchemeOptions};

fn solve(s: &TrialSet) -> lacuna::MeanResult {
    let r = AirmObserved.average(s, &SchemeOptions::default()).unwrap();
    assert!(
        r.diagnostics.converged,
        "not converged: {:?} {:?}",
        r.diagnostics.stop_reason, r.diagnostics.gradient_norm
    );
    r
}

fn population_trials(p: usize, n: usize, t: usize, seed: u64) -> (Mat, Vec<Mat>) {
    let mut rng = Rng::new(seed);
    let sigma = lacuna::simulate::stacks::random_spd(p, 30.0, &mut rng);
    let full = (0..n)
        .map(|_| sample_covariance(&sigma, t, &mut rng))
        .collect();
    (sigma, full)
}

// With every channel observed the masked cost is the Karcher cost: the two solvers
// (masked problem with per-pattern Cholesky; full-data problem) must agree to 1e-10.
#[test]
fn complete_masks_give_the_karcher_mean() {
    let (_, full) = population_trials(8, 40, 30, 1);
    let s = masked_set(&full, vec![(0..8).collect(); 40]);
    let masked = solve(&s).mean;
    let karcher = Karcher.average(&s, &SchemeOptions::default()).unwrap().mean;
    assert!(airm_distance(&masked, &karcher) < 1e-10);
}

// Finite-difference check of the gradient (common practice, no source): the central
// difference of F along random symmetric V matches ⟨∇F(X), V⟩ to O(h²).
#[test]
fn gradient_matches_finite_differences() {
    let (_, full) = population_trials(7, 30, 20, 2);
    let obs = random_dropout(30, 7, 0.5, 3, &mut Rng::new(3));
    let s = masked_set(&full, obs);
    let problem = MaskedKarcherProblem::new(&s);
    let x = InitRule::AvailableCase.start(&s);
    let g = problem.euclidean_gradient(&x).unwrap();
    let mut rng = Rng::new(4);
    for _ in 0..5 {
        let mut v = lacuna::simulate::stacks::gaussian(7, 7, &mut rng);
        v = (&v + v.transpose()) * 0.5 * (x.norm() / 7.0);
        let h = 1e-5;
        let fd = (problem.cost(&(&x + &v * h)).unwrap() - problem.cost(&(&x - &v * h)).unwrap())
            / (2.0 * h);
        let an: f64 = g.iter().zip(v.iter()).map(|(a, b)| a * b).sum();
        assert!(
            (fd - an).abs() < 1e-6 * an.abs().max(1e-3),
            "fd {fd} vs analytic {an}"
        );
    }
}

// Independent reference: scipy L-BFGS-B over a Cholesky parametrisation with symmetric
// square roots (make_fixtures.py, numpy 2.1.3, scipy 1.14.1); p ≤ 16, random dropout.
#[test]
fn agrees_with_scipy_reference_optimum() {
    let f = fixture("masked");
    for case in f["cases"].as_array().unwrap() {
        let p = case["p"].as_u64().unwrap() as usize;
        let observed: Vec<Vec<usize>> = serde_json::from_value(case["observed"].clone()).unwrap();
        let trials: Vec<Trial> = observed
            .into_iter()
            .zip(case["blocks"].as_array().unwrap())
            .map(|(o, b)| Trial {
                observed: o,
                block: mat(b),
            })
            .collect();
        let s = TrialSet::new(default_channel_names(p), trials, None, "fixture").unwrap();
        assert!(identifiability(&s).unconstrained_pairs.is_empty());
        let r = solve(&s);
        let d = airm_distance(&r.mean, &mat(&case["mean"]));
        assert!(d <= 1e-7, "p={p}: distance to scipy optimum {d}");
        let cref = case["cost"].as_f64().unwrap();
        // The reference cost uses raw weights 1/n, as ours does after normalising.
        assert!(
            r.diagnostics.cost.unwrap() <= cref * (1.0 + 1e-10),
            "ours {} vs scipy {cref}",
            r.diagnostics.cost.unwrap()
        );
    }
}

// Consistent sub-blocks: if every block is the matching block of one SPD Σ* and all pairs
// are co-observed, Σ* has zero cost, so it is the minimiser (common practice, no source).
#[test]
fn consistent_blocks_recover_the_source() {
    let sigma = spd(9, 1e4, 5);
    let obs = random_dropout(60, 9, 0.6, 4, &mut Rng::new(6));
    let s = masked_set(&vec![sigma.clone(); 60], obs);
    assert!(identifiability(&s).unconstrained_pairs.is_empty());
    let r = solve(&s);
    assert!(airm_distance(&r.mean, &sigma) < 1e-9);
}

// Pennec, Fillard, Ayache 2006 (affine invariance of δ restricted to sub-blocks):
// permuting channels permutes the mean; D[o,o] C D[o,o] for diagonal D gives D X D.
#[test]
fn permutation_and_diagonal_scaling_equivariance() {
    let (_, full) = population_trials(6, 50, 25, 7);
    let obs = random_dropout(50, 6, 0.4, 2, &mut Rng::new(8));
    let s = masked_set(&full, obs.clone());
    let x = solve(&s).mean;

    let perm = [4usize, 0, 5, 2, 1, 3]; // new channel k is old channel perm[k]
    let mut inv = [0usize; 6];
    for (k, &c) in perm.iter().enumerate() {
        inv[c] = k;
    }
    let pfull: Vec<Mat> = full
        .iter()
        .map(|m| Mat::from_fn(6, 6, |a, b| m[(perm[a], perm[b])]))
        .collect();
    let pobs: Vec<Vec<usize>> = obs
        .iter()
        .map(|o| {
            let mut v: Vec<usize> = o.iter().map(|&c| inv[c]).collect();
            v.sort();
            v
        })
        .collect();
    let xp = solve(&masked_set(&pfull, pobs)).mean;
    let expected = Mat::from_fn(6, 6, |a, b| x[(perm[a], perm[b])]);
    assert!(airm_distance(&xp, &expected) < 1e-9);

    let d = nalgebra::DVector::from_vec(vec![0.5, 3.0, 1.0, 20.0, 0.01, 2.0]);
    let dm = Mat::from_diagonal(&d);
    let sfull: Vec<Mat> = full.iter().map(|m| &dm * m * &dm).collect();
    let xs = solve(&masked_set(&sfull, obs)).mean;
    assert!(airm_distance(&xs, &(&dm * &x * &dm)) < 1e-9);
}

// Known result for this method in the field (no source needed): with 20–40% of trials
// losing 1–4 channels, the masked mean is closer to the complete-data Karcher mean than
// the available-case Euclidean mean projected to SPD and than the Karcher mean of the
// complete trials only. Checked on five seeds; it can fail.
#[test]
fn masked_mean_recovers_complete_data_mean_best() {
    for seed in 0..5u64 {
        let (_, full) = population_trials(12, 120, 40, 100 + seed);
        let obs = random_dropout(120, 12, 0.35, 4, &mut Rng::new(200 + seed));
        let complete_ref = Karcher
            .average(
                &masked_set(&full, vec![(0..12).collect(); 120]),
                &SchemeOptions::default(),
            )
            .unwrap()
            .mean;
        let s = masked_set(&full, obs.clone());
        let masked = solve(&s).mean;
        let available = InitRule::AvailableCase.start(&s);
        let complete_only: Vec<Mat> = full
            .iter()
            .zip(&obs)
            .filter(|(_, o)| o.len() == 12)
            .map(|(m, _)| m.clone())
            .collect();
        let only = Karcher
            .average(
                &TrialSet::from_full(default_channel_names(12), complete_only, None).unwrap(),
                &SchemeOptions::default(),
            )
            .unwrap()
            .mean;
        let (dm, da, dc) = (
            airm_distance(&masked, &complete_ref),
            airm_distance(&available, &complete_ref),
            airm_distance(&only, &complete_ref),
        );
        assert!(
            dm < da && dm < dc,
            "seed {seed}: masked {dm:.4}, available-case {da:.4}, complete-only {dc:.4}"
        );
    }
}

// Dempster 1972; Grone et al. 1984: pairs never co-observed are reported and filled by the
// max-determinant completion, where the inverse vanishes; the cost does not change.
#[test]
fn never_coobserved_pairs_are_reported_and_completed() {
    let (_, full) = population_trials(5, 60, 30, 9);
    // Channel 0 and channel 4 are never in the same trial.
    let obs: Vec<Vec<usize>> = (0..60)
        .map(|i| {
            if i % 2 == 0 {
                vec![0, 1, 2, 3]
            } else {
                vec![1, 2, 3, 4]
            }
        })
        .collect();
    let s = masked_set(&full, obs);
    let r = solve(&s);
    assert_eq!(r.diagnostics.unconstrained_pairs, vec![[0, 4]]);
    assert_eq!(r.diagnostics.completed_pairs, 1);
    assert!(inv_spd(&r.mean)[(0, 4)].abs() < 1e-10 * inv_spd(&r.mean).norm());
    let cost = MaskedKarcherProblem::new(&s).cost(&r.mean).unwrap();
    assert!((cost - r.diagnostics.cost.unwrap()).abs() < 1e-12 * cost);
}

// A channel no trial observes is refused with its name and the way out.
#[test]
fn never_observed_channel_is_refused() {
    let (_, full) = population_trials(4, 10, 20, 10);
    let s = masked_set(&full, vec![vec![0, 1, 3]; 10]);
    let e = AirmObserved
        .average(&s, &SchemeOptions::default())
        .unwrap_err();
    assert!(
        e.to_string()
            .contains("channel ch2 is observed in no trial"),
        "{e}"
    );
    assert!(
        matches!(&e, lacuna::LacunaError::NeverObserved { channel, count: 1 } if channel == "ch2"),
        "{e}"
    );
    let dropped = s
        .without_channels(&identifiability(&s).never_observed)
        .unwrap();
    assert_eq!(solve(&dropped).mean.nrows(), 3);
}

// Multi-start: on ordinary data every start reaches the same mean, and the report says so.
#[test]
fn multi_start_agrees_on_ordinary_data() {
    let (_, full) = population_trials(6, 40, 30, 11);
    let s = masked_set(&full, random_dropout(40, 6, 0.3, 2, &mut Rng::new(12)));
    let o = SchemeOptions {
        starts: 5,
        seed: 3,
        ..SchemeOptions::default()
    };
    let r = AirmObserved.average(&s, &o).unwrap();
    assert_eq!(r.diagnostics.starts.len(), 5);
    assert_eq!(r.diagnostics.starts_agree, Some(true));
}

// Non-convexity example from the issue, two channels: trial 1 observes channel 0 only,
// with variance c; trial 2 observes both as the identity. Along X(t) = R(t) diag(a,b) R(t)ᵀ
// the masked cost is not convex for c far from 1; we check the documented sign of the
// second derivative at a stationary point direction numerically: F''(0) < 0 for c = e⁴
// along the rotation through I with the single-channel trial alone (−2 ln c < 0).
#[test]
fn masked_cost_is_not_geodesically_convex() {
    let c = 4f64.exp();
    let s = TrialSet::new(
        default_channel_names(2),
        vec![Trial {
            observed: vec![0],
            block: Mat::from_element(1, 1, c),
        }],
        None,
        "t",
    )
    .unwrap();
    let problem = MaskedKarcherProblem::new(&s);
    // Geodesic through I: X(t) = exp(t V) with V = [[0,1],[1,0]].
    let f = |t: f64| {
        problem
            .cost(&lacuna::spd::expm_sym(
                &(Mat::from_row_slice(2, 2, &[0.0, 1.0, 1.0, 0.0]) * t),
            ))
            .unwrap()
    };
    let h = 1e-3;
    let second = (f(h) - 2.0 * f(0.0) + f(-h)) / (h * h);
    // F = ½ δ², so F'' = ½·(−2 ln c)·… ; the exact value is −ln c = −4 here.
    assert!(
        (second - (-c.ln())).abs() < 1e-4,
        "second derivative {second}"
    );
}

fn fixture_set(case: &serde_json::Value) -> TrialSet {
    let p = case["p"].as_u64().unwrap() as usize;
    let observed: Vec<Vec<usize>> = serde_json::from_value(case["observed"].clone()).unwrap();
    let trials: Vec<Trial> = observed
        .into_iter()
        .zip(case["blocks"].as_array().unwrap())
        .map(|(o, b)| Trial {
            observed: o,
            block: mat(b),
        })
        .collect();
    TrialSet::new(default_channel_names(p), trials, None, "fixture").unwrap()
}

// Pairs never observed together, no complete trial, strongly correlated channels
// (p = 4, 8, 16). Reference: scipy L-BFGS-B over a Cholesky parametrisation, free
// entries then set by scipy maximising log det (make_fixtures.py masked_free_cases,
// numpy 2.1.3, scipy 1.14.1). Every start must converge, reach the reference cost to
// 1e-8 relative, agree on the determined entries to 1e-8, and leave (X⁻¹)[a,b] = 0 on
// the free pairs (Dempster 1972, Biometrics 28).
#[test]
fn never_coobserved_pairs_converge_from_every_start() {
    let f = fixture("masked_free");
    for case in f["cases"].as_array().unwrap() {
        let s = fixture_set(case);
        let p = s.n_channels();
        let free = identifiability(&s).unconstrained_pairs;
        assert!(!free.is_empty(), "p={p}: the fixture must have free pairs");
        let options = SchemeOptions {
            starts: 5,
            ..SchemeOptions::default()
        };
        let r = AirmObserved.average(&s, &options).unwrap();
        let d = &r.diagnostics;
        for st in &d.starts {
            assert!(st.converged, "p={p}: start {} did not converge", st.init);
            assert!(
                st.iterations <= 60,
                "p={p}: start {} took {} iterations",
                st.init,
                st.iterations
            );
            assert!(
                st.determined_difference <= 1e-8,
                "p={p}: start {} differs by {:.2e} on determined entries",
                st.init,
                st.determined_difference
            );
        }
        assert_eq!(d.starts_agree, Some(true));
        let cref = case["cost"].as_f64().unwrap();
        let cost = d.cost.unwrap();
        assert!(
            ((cost - cref) / cref).abs() <= 1e-8,
            "p={p}: cost {cost} vs scipy {cref}"
        );
        let inv = inv_spd(&r.mean);
        for &[a, b] in &free {
            let scaled = inv[(a, b)] * (r.mean[(a, a)] * r.mean[(b, b)]).sqrt();
            assert!(scaled.abs() < 1e-9, "p={p}: (X⁻¹)[{a},{b}] = {scaled:e}");
        }
        let reference = mat(&case["mean"]);
        let rel = (&r.mean - &reference).norm() / reference.norm();
        assert!(
            rel < 1e-5,
            "p={p}: relative difference to scipy mean {rel:e}"
        );
    }
}

// Grone, Johnson, Sá & Wolkowicz 1984 (Linear Algebra Appl. 58): a 3-cycle of
// specified correlations +0.8, +0.8, −0.8 has no positive definite completion, so the
// masked cost has no minimiser among SPD matrices. The run must end at the boundary,
// not as converged, naming all three channels in the vanishing direction.
#[test]
fn inconsistent_three_cycle_runs_to_the_boundary() {
    let pair = |r: f64| Mat::from_row_slice(2, 2, &[1.0, r, r, 1.0]);
    let trials = vec![
        Trial {
            observed: vec![0, 1],
            block: pair(0.8),
        },
        Trial {
            observed: vec![1, 2],
            block: pair(0.8),
        },
        Trial {
            observed: vec![0, 2],
            block: pair(-0.8),
        },
    ];
    let s = TrialSet::new(default_channel_names(3), trials, None, "cycle").unwrap();
    let r = AirmObserved.average(&s, &SchemeOptions::default()).unwrap();
    let d = &r.diagnostics;
    assert!(!d.converged);
    assert_eq!(d.stop_reason, Some(lacuna::solve::StopReason::Boundary));
    let v = d.boundary.as_ref().expect("vanishing direction reported");
    let mut chans: Vec<usize> = v.channels.iter().map(|c| c.0).collect();
    chans.sort();
    assert_eq!(chans, vec![0, 1, 2]);
    // The written mean is still positive definite (last safe iterate).
    assert!(lacuna::spd::kernels::cholesky(&r.mean).is_some());
    // Consistent correlations (+0.8, +0.8, +0.64 = 0.8·0.8) have a minimiser.
    let ok = vec![
        Trial {
            observed: vec![0, 1],
            block: pair(0.8),
        },
        Trial {
            observed: vec![1, 2],
            block: pair(0.8),
        },
        Trial {
            observed: vec![0, 2],
            block: pair(0.64),
        },
    ];
    let s = TrialSet::new(default_channel_names(3), ok, None, "cycle").unwrap();
    let r = AirmObserved.average(&s, &SchemeOptions::default()).unwrap();
    assert!(r.diagnostics.converged && r.diagnostics.boundary.is_none());
}

// The real-size version of the same failure (common practice, no source): nine
// channels in three groups, three sessions each observing two groups; a large gain
// change flips the sign of one group's coupling in one session, so the pairwise
// couplings of the groups form the inconsistent cycle above. Twenty trials per session.
#[test]
fn inconsistent_sessions_run_to_the_boundary() {
    let mut rng = Rng::new(7);
    let groups: [Vec<usize>; 3] = [vec![0, 1, 2], vec![3, 4, 5], vec![6, 7, 8]];
    let mut trials = Vec::new();
    for (sess, (ga, gb, sign)) in [(0, 1, 1.0), (1, 2, 1.0), (0, 2, -1.0)]
        .into_iter()
        .enumerate()
    {
        let observed: Vec<usize> = groups[ga].iter().chain(&groups[gb]).copied().collect();
        let mut observed = observed;
        observed.sort();
        // One shared factor loads +1 on group a and ±1 on group b, plus small noise.
        let load: Vec<f64> = observed
            .iter()
            .map(|c| if groups[gb].contains(c) { sign } else { 1.0 })
            .collect();
        let k = observed.len();
        let sigma = Mat::from_fn(k, k, |a, b| {
            0.95 * load[a] * load[b] + if a == b { 0.05 } else { 0.0 }
        });
        for _ in 0..20 {
            let c = sample_covariance(&sigma, 200, &mut rng);
            trials.push(Trial {
                observed: observed.clone(),
                block: c,
            });
        }
        let _ = sess;
    }
    let s = TrialSet::new(default_channel_names(9), trials, None, "sessions").unwrap();
    let r = AirmObserved.average(&s, &SchemeOptions::default()).unwrap();
    assert_eq!(
        r.diagnostics.stop_reason,
        Some(lacuna::solve::StopReason::Boundary),
        "{:?}",
        r.diagnostics.trace.last()
    );
}

//! The alternative schemes: complete-trials, available-case, diagonal-loading, shrinkage.

mod common;

use common::rel_err;
use lacuna::schemes::{AvailableCase, CompleteTrials, DiagonalLoading, Karcher, Shrinkage};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::spd::{Mat, airm_distance};
use lacuna::trials::{Trial, TrialSet, default_channel_names};
use lacuna::{AveragingScheme, SchemeOptions};

fn trials(n: usize, p: usize, seed: u64) -> Vec<Mat> {
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, 50.0, &mut rng);
    (0..n)
        .map(|_| sample_covariance(&sigma, 3 * p, &mut rng))
        .collect()
}

fn karcher(mats: Vec<Mat>) -> Mat {
    let p = mats[0].nrows();
    Karcher
        .average(
            &TrialSet::from_full(default_channel_names(p), mats, None).unwrap(),
            &SchemeOptions::default(),
        )
        .unwrap()
        .mean
}

// Common practice, no source: with every channel observed, the available-case mean
// is the arithmetic mean (already SPD, nothing clipped).
#[test]
fn available_case_on_complete_data_is_the_arithmetic_mean() {
    let full = trials(20, 5, 1);
    let s = masked_set(&full, vec![(0..5).collect(); 20]);
    let r = AvailableCase
        .average(&s, &SchemeOptions::default())
        .unwrap();
    let arith = full.iter().fold(Mat::zeros(5, 5), |a, m| a + m) / 20.0;
    assert!(rel_err(&r.mean, &arith) < 1e-14);
    assert_eq!(r.diagnostics.notes.len(), 1);
}

// Pairwise-complete covariance can be indefinite (a documented fact): three trials each
// observing one pair with correlations .99, .99 and −.99 average to I + .99·S, whose
// eigenvalues are 1.99, 1.99, −0.98 (S has eigenvalues 1, 1, −2). The scheme repairs it
// by the Higham 1988 projection and says so.
#[test]
fn available_case_repairs_an_indefinite_pairwise_mean() {
    let pair = |r: f64| Mat::from_row_slice(2, 2, &[1.0, r, r, 1.0]);
    let s = TrialSet::new(
        default_channel_names(3),
        vec![
            Trial {
                observed: vec![0, 1],
                block: pair(0.99),
            },
            Trial {
                observed: vec![1, 2],
                block: pair(0.99),
            },
            Trial {
                observed: vec![0, 2],
                block: pair(-0.99),
            },
        ],
        None,
        "t",
    )
    .unwrap();
    let r = AvailableCase
        .average(&s, &SchemeOptions::default())
        .unwrap();
    assert!(lacuna::spd::cholesky(&r.mean).is_some());
    let note = r.diagnostics.notes.join(" ");
    assert!(note.contains("smallest eigenvalue -9.800e-1"), "{note}");
    assert!(note.contains("1 eigenvalue(s) raised"), "{note}");
}

// complete-trials is the Karcher mean of exactly the complete trials, and refuses when
// there is none (common practice, no source).
#[test]
fn complete_trials_uses_only_complete_ones() {
    let full = trials(30, 6, 2);
    let obs = random_dropout(30, 6, 0.5, 2, &mut Rng::new(3));
    let s = masked_set(&full, obs.clone());
    let r = CompleteTrials
        .average(&s, &SchemeOptions::default())
        .unwrap();
    let subset: Vec<Mat> = full
        .iter()
        .zip(&obs)
        .filter(|(_, o)| o.len() == 6)
        .map(|(m, _)| m.clone())
        .collect();
    assert!(airm_distance(&r.mean, &karcher(subset)) < 1e-12);
    let none = masked_set(
        &full[..3],
        vec![vec![0, 1, 2, 3, 4], vec![1, 2, 3, 4, 5], vec![0, 2, 4, 5]],
    );
    let e = CompleteTrials
        .average(&none, &SchemeOptions::default())
        .unwrap_err();
    assert!(e.to_string().contains("none of the 3 trials is complete"));
}

// Diagonal loading on complete data is the Karcher mean of C + λ(trace C/p)I
// (the definition; common practice, no source).
#[test]
fn diagonal_loading_matches_its_definition() {
    let full = trials(15, 4, 4);
    let s = masked_set(&full, vec![(0..4).collect(); 15]);
    let o = SchemeOptions {
        loading: 0.05,
        ..SchemeOptions::default()
    };
    let r = DiagonalLoading.average(&s, &o).unwrap();
    let loaded: Vec<Mat> = full
        .iter()
        .map(|m| m + Mat::identity(4, 4) * (0.05 * m.trace() / 4.0))
        .collect();
    assert!(airm_distance(&r.mean, &karcher(loaded)) < 1e-12);
}

// Shrinkage with α = 1 turns every trial into (trace/p)·I; the Karcher mean of commuting
// scaled identities is exp(mean log)·I (Moakher 2005). With fills, trace/p is the trial's
// mean observed variance.
#[test]
fn full_shrinkage_gives_the_geometric_mean_of_scales() {
    let full = trials(12, 5, 5);
    let obs = random_dropout(12, 5, 0.5, 2, &mut Rng::new(6));
    let s = masked_set(&full, obs);
    let o = SchemeOptions {
        shrinkage: 1.0,
        ..SchemeOptions::default()
    };
    let r = Shrinkage.average(&s, &o).unwrap();
    let g = (s
        .trials()
        .iter()
        .map(|t| (t.block.trace() / t.observed.len() as f64).ln())
        .sum::<f64>()
        / 12.0)
        .exp();
    assert!(rel_err(&r.mean, &(Mat::identity(5, 5) * g)) < 1e-12);
}

// Invalid intensities are refused as option errors (exit 2 at the command line).
#[test]
fn invalid_intensities_are_refused() {
    let full = trials(5, 3, 7);
    let s = masked_set(&full, vec![(0..3).collect(); 5]);
    let e = DiagonalLoading
        .average(
            &s,
            &SchemeOptions {
                loading: 0.0,
                ..SchemeOptions::default()
            },
        )
        .unwrap_err();
    assert!(
        matches!(&e, lacuna::LacunaError::OutOfRange { setting, .. } if setting == "loading"),
        "{e}"
    );
    let e = Shrinkage
        .average(
            &s,
            &SchemeOptions {
                shrinkage: 1.5,
                ..SchemeOptions::default()
            },
        )
        .unwrap_err();
    assert!(
        matches!(&e, lacuna::LacunaError::OutOfRange { setting, .. } if setting == "shrinkage"),
        "{e}"
    );
}

// Regularisers on rank-deficient (average-referenced) blocks against numpy and
// scikit-learn (make_rank_fixtures.py; numpy 2.1.3, scikit-learn 1.5.2):
// shrunk_covariance for fixed α, C + λ tr(C)/k I for loading, sklearn's oas on the
// window itself for OAS; the trial set records rank k−1 like numpy's matrix_rank; the
// arithmetic scheme after --regularize shrinkage:α equals numpy's mean of the shrunk
// blocks; the Karcher mean refuses the unregularised blocks naming the rank.
#[test]
fn regularisers_match_sklearn_on_rank_deficient_blocks() {
    use lacuna::schemes::regularize::Regularizer;
    use lacuna::schemes::{Arithmetic, Karcher};
    let f = common::fixture("regularize");
    for case in f["cases"].as_array().unwrap() {
        let k = case["k"].as_u64().unwrap() as usize;
        let t = case["samples"].as_u64().unwrap() as usize;
        let alpha = case["alpha"].as_f64().unwrap();
        let lambda = case["lambda"].as_f64().unwrap();
        let blocks: Vec<Mat> = case["blocks"]
            .as_array()
            .unwrap()
            .iter()
            .map(common::mat)
            .collect();
        for (j, b) in blocks.iter().enumerate() {
            for (reg, key) in [
                (Regularizer::Shrinkage { alpha }, "shrunk"),
                (Regularizer::Loading { lambda }, "loaded"),
                (Regularizer::Oas { samples: t }, "oas"),
            ] {
                let want = common::mat(&case[key][j]);
                let got = reg.apply_block(b);
                let err = common::rel_err(&got, &want);
                assert!(err < 1e-10, "k={k} {key} block {j}: relative error {err:e}");
            }
        }
        let set = TrialSet::from_full(default_channel_names(k), blocks, None).unwrap();
        let ranks: Vec<u64> = serde_json::from_value(case["ranks"].clone()).unwrap();
        for (i, &r) in ranks.iter().enumerate() {
            assert_eq!(set.rank(i) as u64, r, "numpy matrix_rank");
        }
        let err = Karcher
            .average(&set, &SchemeOptions::default())
            .unwrap_err()
            .to_string();
        assert!(err.contains(&format!("rank {} of {k}", k - 1)), "{err}");
        let opts = SchemeOptions {
            regularize: Some(Regularizer::Shrinkage { alpha }),
            ..SchemeOptions::default()
        };
        let m = Arithmetic.average(&set, &opts).unwrap().mean;
        let want = common::mat(&case["arithmetic_of_shrunk"]);
        assert!(common::rel_err(&m, &want) < 1e-10);
        // And every Riemannian scheme runs after it.
        assert!(Karcher.average(&set, &opts).unwrap().diagnostics.converged);
    }
}

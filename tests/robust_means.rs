//! Robust masked means (`airm-observed-median`, `airm-observed-huber`).

mod common;

use common::spd;
use lacuna::SchemeOptions;
use lacuna::schemes::{
    AirmObserved, AveragingScheme, ObservedHuber, ObservedMedian, observed_distances, outliers,
};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, sample_covariance};
use lacuna::spd::functions::{invsqrtm_spd, powm_spd, sqrtm_spd};
use lacuna::spd::{Mat, airm_distance, symmetrize};
use lacuna::trials::TrialSet;

fn mean_of(scheme: &dyn AveragingScheme, set: &TrialSet) -> Mat {
    let r = scheme.average(set, &SchemeOptions::default()).unwrap();
    assert!(
        r.diagnostics.converged,
        "{}: {:?}",
        scheme.name(),
        r.diagnostics.notes
    );
    r.mean
}

/// 100 trials of 6 channels from one population, 30 % losing 1–2 channels;
/// with `artefacts`, every fifth trial has channel 2's variance ×100 (its
/// row and column ×10), as when an electrode picks up a large artefact.
fn trials(artefacts: bool) -> TrialSet {
    let mut rng = Rng::new(8);
    let sigma = spd(6, 20.0, 81);
    let mut full: Vec<Mat> = (0..100)
        .map(|_| sample_covariance(&sigma, 24, &mut rng))
        .collect();
    if artefacts {
        for c in full.iter_mut().step_by(5) {
            let mut d = Mat::identity(6, 6);
            d[(2, 2)] = 10.0;
            *c = symmetrize(&(&d * &*c * &d));
        }
    }
    // Channel 2 stays observed, so the artefacts are seen.
    let mut obs = random_dropout(100, 6, 0.3, 2, &mut rng);
    for (i, o) in obs.iter_mut().enumerate() {
        if i % 5 == 0 && !o.contains(&2) {
            o.push(2);
            o.sort_unstable();
        }
    }
    masked_set(&full, obs)
}

// Fletcher, Venkatasubramanian, Joshi 2009 (robustness of the geometric
// median) and Huber 1964 (bounded influence), can fail: with 20 % of trials
// carrying a ×100 artefact on one channel, the squared-distance masked mean
// moves far from the clean mean (measured 1.13); the median stays within
// 0.45 (measured 0.39) and the Huber-type mean, whose outliers keep a
// bounded but non-zero pull (weight c/δ ≈ 0.5 here at the default k = 1.5),
// within 0.8 (measured 0.74).
#[test]
fn robust_means_resist_gross_artefacts() {
    let clean = mean_of(&AirmObserved, &trials(false));
    let dirty = trials(true);
    let squared = airm_distance(&mean_of(&AirmObserved, &dirty), &clean);
    let median = airm_distance(&mean_of(&ObservedMedian, &dirty), &clean);
    let huber = airm_distance(&mean_of(&ObservedHuber, &dirty), &clean);
    assert!(
        squared > 1.0,
        "the artefacts should move the plain mean: {squared}"
    );
    assert!(median < 0.45, "median {median} (squared {squared})");
    assert!(huber < 0.8, "huber {huber} (squared {squared})");
}

// The artefact trials are the ones flagged (modified z-score above 3.5 of
// their distance to the median), and few clean ones are.
#[test]
fn artefact_trials_are_flagged() {
    let dirty = trials(true);
    let m = mean_of(&ObservedMedian, &dirty);
    let flagged: Vec<usize> = outliers(&observed_distances(&dirty, &m))
        .into_iter()
        .map(|(i, _)| i)
        .collect();
    let hits = flagged.iter().filter(|&&i| i % 5 == 0).count();
    let false_alarms = flagged.len() - hits;
    assert!(
        hits >= 18,
        "{hits} of 20 artefact trials flagged: {flagged:?}"
    );
    assert!(
        false_alarms <= 2,
        "{false_alarms} clean trials flagged: {flagged:?}"
    );
}

/// A #_t B = A^{1/2} (A^{-1/2} B A^{-1/2})^t A^{1/2}.
fn geodesic(a: &Mat, b: &Mat, t: f64) -> Mat {
    let ah = sqrtm_spd(a);
    let aih = invsqrtm_spd(a);
    symmetrize(&(&ah * powm_spd(&symmetrize(&(&aih * b * &aih)), t) * &ah))
}

// Bhatia 2007 (Positive Definite Matrices, ch. 6): for two matrices every
// point of the geodesic segment minimises δ(X, A) + δ(X, B); started at the
// midpoint (the Karcher mean) the reweighting gives both equal weight and
// stays there. Both robust means equal the midpoint A #_{1/2} B.
#[test]
fn two_matrices_give_the_geodesic_midpoint() {
    let a = spd(4, 10.0, 1);
    let b = spd(4, 30.0, 2);
    let set = TrialSet::from_full(
        lacuna::trials::default_channel_names(4),
        vec![a.clone(), b.clone()],
        None,
    )
    .unwrap();
    let mid = geodesic(&a, &b, 0.5);
    for s in [&ObservedMedian as &dyn AveragingScheme, &ObservedHuber] {
        let d = airm_distance(&mean_of(s, &set), &mid);
        assert!(d < 1e-8, "{}: {d}", s.name());
    }
}

// Common practice, no source: four matrices placed symmetrically about the
// identity (X and X⁻¹ both present, at two different distances) have the
// identity as their median and Huber centre, by symmetry and uniqueness.
#[test]
fn a_symmetric_configuration_has_its_centre_as_median() {
    let d = |v: [f64; 3]| Mat::from_diagonal(&nalgebra::DVector::from_vec(v.to_vec()));
    let mats = vec![
        d([2.0, 0.5, 1.5]),
        d([0.5, 2.0, 1.0 / 1.5]),
        d([3.0, 3.0, 0.8]),
        d([1.0 / 3.0, 1.0 / 3.0, 1.25]),
    ];
    let set = TrialSet::from_full(lacuna::trials::default_channel_names(3), mats, None).unwrap();
    for s in [&ObservedMedian as &dyn AveragingScheme, &ObservedHuber] {
        let dist = airm_distance(&mean_of(s, &set), &Mat::identity(3, 3));
        assert!(dist < 1e-8, "{}: {dist}", s.name());
    }
}

// Hostile values of --huber are refused before any work, naming the flag.
#[test]
fn hostile_huber_thresholds_are_refused() {
    let d = common::Dir::new("huber-hostile");
    for v in ["NaN", "inf", "-1", "0", "1e308"] {
        let out = d.path("m.npy");
        let (covs, mask) = (common::demo("covs.npy"), common::demo("mask.csv"));
        let (code, _, e) = common::lacuna(&[
            "mean",
            "--covs",
            &covs,
            "--mask",
            &mask,
            "--scheme",
            "airm-observed-huber",
            "--huber",
            v,
            "--out",
            common::s(&out),
        ]);
        assert_eq!(code, 2, "{v}: {e}");
        assert!(e.contains("--huber"), "{v}: {e}");
        assert!(!out.exists());
    }
}

// The flags reach the user: `mean --report` lists the flagged trials with
// their distances and z-scores, and `compare --html` shows them in an
// "Outlier trials" table. Can fail: the artefact trials (every fifth) must
// be the ones listed, the same as the library's `outliers` on the same data.
#[test]
fn outlier_flags_reach_the_report_and_the_page() {
    use common::{Dir, lacuna, read_json, s};
    let d = Dir::new("robust-flags");
    let dirty = trials(true);
    let covs = d.write(
        "covs.npy",
        &lacuna::trials::io::encode_stack_with_nan(&dirty),
    );
    let mask = d.write("mask.npy", &lacuna::trials::io::encode_mask(&dirty));
    let expected: Vec<usize> = {
        let m = mean_of(&ObservedMedian, &dirty);
        outliers(&observed_distances(&dirty, &m))
            .into_iter()
            .map(|(i, _)| i)
            .collect()
    };
    assert!(expected.iter().filter(|&&i| i % 5 == 0).count() >= 18);

    let report = d.path("median.json");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--scheme",
        "airm-observed-median",
        "--out",
        s(&d.path("median.npy")),
        "--report",
        s(&report),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let r = read_json(&report);
    let listed: Vec<usize> = r["outliers"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["trial"].as_u64().unwrap() as usize)
        .collect();
    assert_eq!(listed, expected);
    for o in r["outliers"].as_array().unwrap() {
        assert!(o["z"].as_f64().unwrap() > 3.5);
        assert!(o["distance"].as_f64().unwrap() > 0.0);
    }

    let out = d.path("cmp");
    let html = d.path("page.html");
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--schemes",
        "airm-observed,airm-observed-median",
        "--repeats",
        "2",
        "--bootstrap",
        "0",
        "--out",
        s(&out),
        "--html",
        s(&html),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let c = read_json(out.join("compare.json"));
    let rows = c["schemes"].as_array().unwrap();
    let median = rows
        .iter()
        .find(|r| r.to_string().contains("\"airm-observed-median\""))
        .unwrap();
    let in_compare = median.to_string();
    for i in &expected {
        assert!(in_compare.contains(&format!("\"trial\":{i},")), "{i}");
    }
    let page = std::fs::read_to_string(&html).unwrap();
    assert!(page.contains("Outlier trials"));
    assert!(page.contains(&format!("{} of 100 trials flagged", expected.len())));
    for i in &expected {
        assert!(
            page.contains(&format!("<tr><td>{i}</td>")),
            "trial {i} not on the page"
        );
    }
}

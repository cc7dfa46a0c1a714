//! Awkward input through the command line: where no positive definite mean
//! exists, where a scheme estimates only part of the mean, and where a
//! supporting file does not match the trial set. Exit 0 must mean a correct
//! answer; everything else says why.

mod common;

use common::{Dir, lacuna, s};

use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_spd, sample_covariance};
use lacuna::trials::io::{encode_mask, encode_stack_with_nan};
use lacuna::trials::npy::encode_f64;

/// The three-trial 3-cycle: pairs {0,1}, {1,2}, {0,2} with correlations
/// +0.8, +0.8, −0.8 and NaN outside each observed pair.
fn three_cycle(d: &Dir) -> std::path::PathBuf {
    let mut data = vec![f64::NAN; 27];
    for (i, (a, b, r)) in [(0, 1, 0.8), (1, 2, 0.8), (0, 2, -0.8)]
        .into_iter()
        .enumerate()
    {
        let at = |x: usize, y: usize| i * 9 + x * 3 + y;
        data[at(a, a)] = 1.0;
        data[at(b, b)] = 1.0;
        data[at(a, b)] = r;
        data[at(b, a)] = r;
    }
    d.write("cycle.npy", &encode_f64(&[3, 3, 3], &data))
}

// Grone, Johnson, Sá & Wolkowicz 1984 (Linear Algebra Appl. 58): this partial
// correlation matrix has no positive definite completion, so there is no SPD
// minimiser. The CLI must exit 4, still write the (positive definite) mean and a
// report that names the inconsistency and the channels.
#[test]
fn inconsistent_cycle_exits_4_with_reason() {
    let d = Dir::new("cycle");
    let covs = three_cycle(&d);
    let (out, rep) = (d.path("m.csv"), d.path("r.json"));
    let (code, said, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--out",
        s(&out),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 4, "{err}");
    // The warning (stderr) points at the boundary; the summary's notes
    // (stdout) say why.
    assert!(err.contains("boundary"), "{err}");
    assert!(said.contains("mutually inconsistent"), "{said}");
    assert!(out.exists() && rep.exists());
    let r = common::read_json(&rep);
    assert_eq!(r["converged"], false);
    assert_eq!(r["stop_reason"], "boundary");
    assert_eq!(r["boundary"]["channels"].as_array().unwrap().len(), 3);
    let m = lacuna::trials::io::read_matrix(&out).unwrap();
    assert!(
        lacuna::spd::kernels::cholesky(&m).is_some(),
        "written mean must be PD"
    );
}

// Common practice, no source: entries a scheme did not estimate are written as
// empty CSV cells (NaN in NPY), never as invented numbers.
#[test]
fn common_channels_leaves_unestimated_entries_empty() {
    let d = Dir::new("common");
    // Channels 4 and 5 each drop out of some trials; 0–3 are always observed.
    let mut rng = Rng::new(3);
    let sigma = random_spd(6, 20.0, &mut rng);
    let full: Vec<_> = (0..40)
        .map(|_| sample_covariance(&sigma, 40, &mut rng))
        .collect();
    let obs: Vec<Vec<usize>> = (0..40)
        .map(|i| match i % 4 {
            0 => vec![0, 1, 2, 3, 5],
            1 => vec![0, 1, 2, 3, 4],
            _ => (0..6).collect(),
        })
        .collect();
    let set = masked_set(&full, obs);
    let covs = d.write("covs.npy", &encode_stack_with_nan(&set));
    let mask = d.write("mask.npy", &encode_mask(&set));
    let out = d.path("m.csv");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--scheme",
        "common-channels",
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 0, "{err}");
    let m = lacuna::trials::io::read_matrix(&out).unwrap();
    let text = std::fs::read_to_string(&out).unwrap();
    let nan_rows = (0..6).filter(|&a| m[(a, a)].is_nan()).count();
    assert!(
        nan_rows > 0,
        "the random dropout leaves some channel out of a trial"
    );
    assert!(text.contains(",,") || text.lines().any(|l| l.ends_with(',') || l.starts_with(',')));
    for a in 0..6 {
        for b in 0..6 {
            assert_eq!(m[(a, b)].is_nan(), m[(a, a)].is_nan() || m[(b, b)].is_nan());
        }
    }
}

// Common practice, no source: a misspelt scheme is a usage error that suggests the
// closest name, and nothing is written.
#[test]
fn compare_refuses_unknown_scheme_names() {
    let d = Dir::new("typo");
    let (covs, mask) = common::write_masked_set(&d, 30, 5, 4);
    let out = d.path("cmp");
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--schemes",
        "airm-observed,shrinkge",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("'shrinkge'") && err.contains("did you mean 'shrinkage'"),
        "{err}"
    );
    assert!(!out.exists());
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--scheme",
        "airm-observd",
        "--out",
        s(&d.path("m.npy")),
    ]);
    assert_eq!(code, 2);
    assert!(err.contains("did you mean 'airm-observed'"), "{err}");
}

// Common practice, no source: an epochs.json from another extraction is refused
// (exit 3, nothing written) instead of drawing a wrong dropout raster.
#[test]
fn compare_refuses_epochs_of_another_trial_set() {
    let d = Dir::new("epochs");
    let (covs, mask) = common::write_masked_set(&d, 30, 5, 5);
    let names: Vec<String> = (0..5).map(|c| format!("ch{c}")).collect();
    let epochs: Vec<serde_json::Value> = (0..12)
        .map(|e| serde_json::json!({"epoch": e, "trial": e, "masked": []}))
        .collect();
    let doc = serde_json::json!({"channels": names, "epochs": epochs});
    let ep = d.write("epochs.json", doc.to_string().as_bytes());
    let (out, html) = (d.path("cmp"), d.path("r.html"));
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--schemes",
        "airm-observed,shrinkage",
        "--no-validation",
        "--no-leave-out",
        "--out",
        s(&out),
        "--html",
        s(&html),
        "--epochs",
        s(&ep),
        "--quiet",
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("epochs.json") && err.contains("12 kept epochs"),
        "{err}"
    );
    assert!(!out.exists() && !html.exists());
}

/// The demo study re-referenced to the average of each trial's observed
/// channels: every block has rank k−1.
fn average_referenced_demo(d: &Dir) -> (std::path::PathBuf, std::path::PathBuf) {
    let root = env!("CARGO_MANIFEST_DIR");
    let mask = std::path::PathBuf::from(format!("{root}/demo-data/mask.csv"));
    let set = lacuna::trials::io::load_trial_set(
        std::path::Path::new(&format!("{root}/demo-data/covs.npy")),
        Some(&mask),
        None,
    )
    .unwrap();
    let trials: Vec<lacuna::trials::Trial> = set
        .trials()
        .iter()
        .map(|t| {
            let k = t.observed.len();
            let h = lacuna::Mat::from_fn(k, k, |a, b| f64::from(u8::from(a == b)) - 1.0 / k as f64);
            lacuna::trials::Trial {
                observed: t.observed.clone(),
                block: &h * &t.block * &h,
            }
        })
        .collect();
    let avg = lacuna::trials::TrialSet::new(set.channels().to_vec(), trials, None, "avg").unwrap();
    (d.write("avgref.npy", &encode_stack_with_nan(&avg)), mask)
}

// Common practice, no source: average-referenced data (rank p−1) are served —
// the masked mean refuses them naming the rank and the regularisers, runs after
// --regularize, the rank table names the cause, and compare recommends from the
// held-out likelihood over the regularisation grid (exit 0).
#[test]
fn average_referenced_demo_is_served() {
    let d = Dir::new("avgref");
    let (covs, mask) = average_referenced_demo(&d);
    let out = d.path("m.npy");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("rank 22 of 23") && err.contains("--regularize"),
        "{err}"
    );
    assert!(!out.exists());
    let rep = d.path("r.json");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--regularize",
        "shrinkage:0.05",
        "--out",
        s(&out),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    let r = common::read_json(&rep);
    assert_eq!(r["ranks"]["by_cause"]["average-reference"], 240);
    assert_eq!(r["regularizer"]["kind"], "shrinkage");
    let cmp = d.path("cmp");
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--no-leave-out",
        "--bootstrap",
        "0",
        "--out",
        s(&cmp),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let c = common::read_json(cmp.join("compare.json"));
    assert_eq!(c["recommendation"]["primary"], "held-out-fit");
    assert_eq!(c["held_out_fit"]["criterion"], "likelihood");
    assert!(c["simulated_dropout"].is_null());
    let rec = c["recommendation"]["scheme"].as_str().unwrap();
    let ok = c["schemes"]
        .as_array()
        .unwrap()
        .iter()
        .any(|x| x["scheme"] == rec && x["status"] == "ok");
    assert!(ok, "the recommended scheme ran");
}

// scipy 1.14.1 BFGS over a Cholesky parametrisation (make_local_minima_fixture.py):
// the set has exactly two local minima, with positive and negative correlation
// and different costs. Random starts (seed 3) reach both; the report lists both
// costs, calls the higher one a different local minimum, and writes the lower.
#[test]
fn two_local_minima_are_both_reported() {
    let f = common::fixture("local_minima");
    let stack: Vec<f64> = f["stack"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|m| m.as_array().unwrap().iter())
        .flat_map(|row| row.as_array().unwrap().iter())
        .map(|v| v.as_f64().unwrap_or(f64::NAN))
        .collect();
    let n = stack.len() / 4;
    let d = Dir::new("two-minima");
    let covs = d.write("covs.npy", &encode_f64(&[n, 2, 2], &stack));
    let (out, rep) = (d.path("m.csv"), d.path("r.json"));
    let (code, said, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--starts",
        "8",
        "--seed",
        "3",
        "--out",
        s(&out),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(said.contains("more than one local minimum"), "{said}");
    let minima = f["minima"].as_array().unwrap();
    assert_eq!(minima.len(), 2);
    let cost = |i: usize| minima[i]["cost"].as_f64().unwrap();
    let r = common::read_json(&rep);
    assert_eq!(r["starts_agree"], false);
    let starts = r["starts"].as_array().unwrap();
    let close = |a: f64, b: f64| (a - b).abs() <= 1e-10 * b.abs();
    // Every start converged, to one of the two minima; both were reached.
    for st in starts {
        assert_eq!(st["converged"], true);
        let c = st["cost"].as_f64().unwrap();
        assert!(close(c, cost(0)) || close(c, cost(1)), "cost {c}");
    }
    let higher: Vec<_> = starts
        .iter()
        .filter(|st| close(st["cost"].as_f64().unwrap(), cost(1)))
        .collect();
    assert!(!higher.is_empty(), "no start reached the second minimum");
    assert!(
        higher
            .iter()
            .all(|st| st["verdict"] == "different local minimum")
    );
    // The written mean is the lower minimum.
    let m = lacuna::trials::io::read_matrix(&out).unwrap();
    let want = &minima[0]["mean"];
    for a in 0..2 {
        for b in 0..2 {
            let w = want[a][b].as_f64().unwrap();
            assert!(
                (m[(a, b)] - w).abs() <= 1e-6 * w.abs(),
                "({a},{b}): {} vs {w}",
                m[(a, b)]
            );
        }
    }
}

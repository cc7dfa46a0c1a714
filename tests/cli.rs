//! End-to-end tests of the `lacuna` binary: outputs, exit codes, bad input.

mod common;

use common::{Dir, lacuna, s};

use std::path::Path;

use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{random_spd, sample_covariance};
use lacuna::trials::npy::{encode_f64, encode_u8};

/// Complete stack as raw data for hand-made corruptions.
fn complete_stack(n: usize, p: usize) -> Vec<f64> {
    let mut rng = Rng::new(5);
    let sigma = random_spd(p, 10.0, &mut rng);
    let mut data = Vec::new();
    for _ in 0..n {
        let c = sample_covariance(&sigma, 30, &mut rng);
        for i in 0..p {
            for j in 0..p {
                data.push(c[(i, j)]);
            }
        }
    }
    data
}

fn expect_refusal(args: &[&str], out: &Path, needles: &[&str]) {
    let (code, _, err) = lacuna(args);
    assert_eq!(code, 3, "stderr: {err}");
    for n in needles {
        assert!(err.contains(n), "missing '{n}' in: {err}");
    }
    assert!(!out.exists(), "an output file was left behind");
}

// GUIDE §4 contract: flags, NPY output, report fields, exit 0.
#[test]
fn mean_writes_npy_and_report_with_contract_fields() {
    let d = Dir::new("ok");
    let (covs, mask) = common::write_masked_set(&d, 60, 6, 1);
    let (out, rep) = (d.path("mean.npy"), d.path("r.json"));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--scheme",
        "airm-observed",
        "--out",
        s(&out),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    let m = lacuna::trials::io::read_matrix(&out).unwrap();
    assert_eq!(m.nrows(), 6);
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&rep).unwrap()).unwrap();
    assert_eq!(r["converged"], true);
    assert!(r["iterations"].as_u64().unwrap() > 0);
    assert!(r["gradient_norm"].as_f64().unwrap() <= 1e-10);
    assert!(r["unconstrained_pairs"].is_array());
    assert_eq!(r["coobservation"].as_array().unwrap().len(), 6);
    assert!(
        !std::fs::read_dir(&d.0).unwrap().any(|e| e
            .unwrap()
            .file_name()
            .to_string_lossy()
            .contains("partial"))
    );
}

// NaN-encoded stack without a mask: the mask is inferred; CSV output has a header.
#[test]
fn infers_mask_from_nan_and_writes_csv() {
    let d = Dir::new("csv");
    let (covs, _) = common::write_masked_set(&d, 40, 5, 2);
    let out = d.path("mean.csv");
    let (code, _, err) = lacuna(&["mean", "--covs", s(&covs), "--out", s(&out), "--quiet"]);
    assert_eq!(code, 0, "{err}");
    let text = std::fs::read_to_string(&out).unwrap();
    assert!(text.starts_with("ch0,ch1,ch2,ch3,ch4\n"));
    assert_eq!(text.lines().count(), 6);
}

// Every full-data scheme runs on complete data.
#[test]
fn every_full_data_scheme_runs() {
    let d = Dir::new("schemes");
    let covs = d.write("covs.npy", &encode_f64(&[30, 4, 4], &complete_stack(30, 4)));
    for scheme in [
        "airm",
        "log-euclidean",
        "arithmetic",
        "harmonic",
        "airm-observed",
    ] {
        let out = d.path(&format!("{scheme}.npy"));
        let (code, _, err) = lacuna(&[
            "mean",
            "--covs",
            s(&covs),
            "--scheme",
            scheme,
            "--out",
            s(&out),
            "--quiet",
        ]);
        assert_eq!(code, 0, "{scheme}: {err}");
    }
}

// Same input, 1 and 2 threads: byte-identical output (GUIDE §3 determinism).
#[test]
fn output_does_not_depend_on_threads() {
    let d = Dir::new("threads");
    let (covs, mask) = common::write_masked_set(&d, 200, 8, 3);
    let (a, b) = (d.path("a.npy"), d.path("b.npy"));
    assert_eq!(
        lacuna(&[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--out",
            s(&a),
            "--threads",
            "1",
            "--quiet"
        ])
        .0,
        0
    );
    assert_eq!(
        lacuna(&[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--out",
            s(&b),
            "--threads",
            "2",
            "--quiet"
        ])
        .0,
        0
    );
    assert_eq!(std::fs::read(a).unwrap(), std::fs::read(b).unwrap());
}

#[test]
fn refuses_non_symmetric_matrix() {
    let d = Dir::new("asym");
    let mut data = complete_stack(5, 4);
    data[2 * 16 + 4 + 3] += 0.5; // trial 2, row 1, column 3
    let covs = d.write("covs.npy", &encode_f64(&[5, 4, 4], &data));
    let out = d.path("m.npy");
    expect_refusal(
        &["mean", "--covs", s(&covs), "--out", s(&out)],
        &out,
        &["covs.npy", "trial 2", "not symmetric"],
    );
}

// A duplicated channel makes a block singular (rank 2 of 3): data, not an error.
// Riemannian schemes refuse it naming the rank; regularising schemes take it; an
// indefinite block is refused naming trial, channel and eigenvalue (common
// practice, no source).
#[test]
fn singular_blocks_are_ranked_and_indefinite_ones_refused() {
    let d = Dir::new("notpd");
    let mut data = complete_stack(4, 3);
    // Trial 1: channel 2 duplicates channel 1.
    for k in 0..3 {
        data[9 + 2 * 3 + k] = data[9 + 3 + k];
        data[9 + k * 3 + 2] = data[9 + k * 3 + 1];
    }
    data[9 + 2 * 3 + 2] = data[9 + 3 + 1];
    let covs = d.write("covs.npy", &encode_f64(&[4, 3, 3], &data));
    let out = d.path("m.npy");
    expect_refusal(
        &["mean", "--covs", s(&covs), "--out", s(&out)],
        &out,
        &["trial 1 has rank 2 of 3", "--regularize"],
    );
    let (code, said, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--scheme",
        "shrinkage",
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(said.contains("1 of 4 trials are rank-deficient"), "{said}");
    // Trial 2: correlation 1.5 between channels 0 and 1 is indefinite.
    let mut bad = complete_stack(4, 3);
    let v = 1.5 * (bad[18] * bad[18 + 4]).sqrt();
    bad[18 + 1] = v;
    bad[18 + 3] = v;
    let covs = d.write("bad.npy", &encode_f64(&[4, 3, 3], &bad));
    let out = d.path("m2.npy");
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--scheme",
            "shrinkage",
            "--out",
            s(&out),
        ],
        &out,
        &[
            "trial 2, channel ch1",
            "indefinite beyond rounding",
            "eigenvalue -",
        ],
    );
}

#[test]
fn refuses_nan_inside_observed_block() {
    let d = Dir::new("nan");
    let mut data = complete_stack(3, 3);
    data[2 * 9 + 1] = f64::NAN; // trial 2, (0, 1) — off-diagonal, so not an unobserved channel
    let covs = d.write("covs.npy", &encode_f64(&[3, 3, 3], &data));
    let mask = d.write("mask.npy", &encode_u8(&[3, 3], &[1; 9]));
    let out = d.path("m.npy");
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--out",
            s(&out),
        ],
        &out,
        &["trial 2, channel ch0", "NaN"],
    );
}

#[test]
fn refuses_shape_mismatch_dtype_and_truncation() {
    let d = Dir::new("shape");
    let covs = d.write("covs.npy", &encode_f64(&[3, 3, 3], &complete_stack(3, 3)));
    let mask = d.write("mask.npy", &encode_u8(&[3, 4], &[1; 12]));
    let out = d.path("m.npy");
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--out",
            s(&out),
        ],
        &out,
        &["mask.npy", "does not match"],
    );

    let mut int_stack = encode_f64(&[3, 3, 3], &complete_stack(3, 3));
    let pos = int_stack.windows(3).position(|w| w == b"<f8").unwrap();
    int_stack[pos..pos + 3].copy_from_slice(b"<i8");
    let ints = d.write("ints.npy", &int_stack);
    expect_refusal(
        &["mean", "--covs", s(&ints), "--out", s(&out)],
        &out,
        &["ints.npy", "dtype <i8"],
    );

    let full = encode_f64(&[3, 3, 3], &complete_stack(3, 3));
    let cut = d.write("cut.npy", &full[..full.len() - 20]);
    expect_refusal(
        &["mean", "--covs", s(&cut), "--out", s(&out)],
        &out,
        &["cut.npy", "truncated"],
    );

    let junk = d.write("junk.npy", b"definitely not an array");
    expect_refusal(
        &["mean", "--covs", s(&junk), "--out", s(&out)],
        &out,
        &["junk.npy", "not an NPY file"],
    );
}

#[test]
fn refuses_trial_without_channels_and_bad_weights() {
    let d = Dir::new("empty");
    let covs = d.write("covs.npy", &encode_f64(&[3, 3, 3], &complete_stack(3, 3)));
    let mask = d.write(
        "mask.npy",
        &encode_u8(&[3, 3], &[1, 1, 1, 0, 0, 0, 1, 1, 1]),
    );
    let out = d.path("m.npy");
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--out",
            s(&out),
        ],
        &out,
        &["trial 1: no channel is observed"],
    );

    let neg = d.write("w.csv", b"weight\n1\n-2\n1\n");
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--weights",
            s(&neg),
            "--out",
            s(&out),
        ],
        &out,
        &["trial 1", "negative"],
    );
    let zero = d.write("z.npy", &encode_f64(&[3], &[0.0, 0.0, 0.0]));
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--weights",
            s(&zero),
            "--out",
            s(&out),
        ],
        &out,
        &["all weights are zero"],
    );
    let short = d.write("short.npy", &encode_f64(&[2], &[1.0, 1.0]));
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--weights",
            s(&short),
            "--out",
            s(&out),
        ],
        &out,
        &["2 weights for 3 trials"],
    );
}

#[test]
fn unobserved_channel_refused_unless_dropped() {
    let d = Dir::new("drop");
    let covs = d.write("covs.npy", &encode_f64(&[3, 3, 3], &complete_stack(3, 3)));
    let mask = d.write("mask.csv", b"Fz,Cz,Pz\n1,0,1\n1,0,1\n1,0,1\n");
    let (out, rep) = (d.path("m.csv"), d.path("r.json"));
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--out",
            s(&out),
        ],
        &out,
        &["channel Cz is observed in no trial", "--drop-unobserved"],
    );
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--out",
        s(&out),
        "--report",
        s(&rep),
        "--drop-unobserved",
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(
        std::fs::read_to_string(&out)
            .unwrap()
            .starts_with("Fz,Pz\n")
    );
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&rep).unwrap()).unwrap();
    assert_eq!(r["dropped_channels"], serde_json::json!(["Cz"]));
}

#[test]
fn full_data_scheme_on_masked_data_is_refused() {
    let d = Dir::new("fullmask");
    let (covs, mask) = common::write_masked_set(&d, 30, 5, 4);
    let out = d.path("m.npy");
    expect_refusal(
        &[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--scheme",
            "airm",
            "--out",
            s(&out),
        ],
        &out,
        &["needs every channel", "airm-observed"],
    );
}

#[test]
fn usage_errors_exit_2() {
    let (code, _, err) = lacuna(&[
        "mean", "--covs", "x.npy", "--out", "y.npy", "--scheme", "nonesuch",
    ]);
    assert_eq!(code, 2);
    assert!(err.contains("--scheme 'nonesuch' is not valid"), "{err}");
    assert_eq!(lacuna(&["mean", "--out", "y.npy"]).0, 2);
}

// Non-convergence: exit 4, the mean is still written, the report says why.
#[test]
fn non_convergence_exits_4_and_still_writes() {
    let d = Dir::new("maxiter");
    let (covs, mask) = common::write_masked_set(&d, 50, 6, 6);
    let (out, rep) = (d.path("m.npy"), d.path("r.json"));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--out",
        s(&out),
        "--report",
        s(&rep),
        "--max-iter",
        "1",
    ]);
    assert_eq!(code, 4, "{err}");
    assert!(out.exists());
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&rep).unwrap()).unwrap();
    assert_eq!(r["converged"], false);
    assert_eq!(r["stop_reason"], "max-iterations");
    assert!(r["advice"][0].as_str().unwrap().contains("--max-iter"));
}

// A refused run leaves an existing output file exactly as it was.
#[test]
fn failed_run_keeps_previous_output() {
    let d = Dir::new("keep");
    let covs = d.write("covs.npy", b"broken");
    let out = d.write("m.npy", b"previous result");
    let (code, _, _) = lacuna(&["mean", "--covs", s(&covs), "--out", s(&out)]);
    assert_eq!(code, 3);
    assert_eq!(std::fs::read(&out).unwrap(), b"previous result");
}

// The README's main command, on the committed demo data (minus --release): it must
// converge and cover all 24 electrodes.
#[test]
fn readme_command_runs_on_demo_data() {
    let d = Dir::new("demo");
    let root = env!("CARGO_MANIFEST_DIR");
    let (out, rep) = (d.path("mean.csv"), d.path("report.json"));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &format!("{root}/demo-data/covs.npy"),
        "--mask",
        &format!("{root}/demo-data/mask.csv"),
        "--out",
        s(&out),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(
        std::fs::read_to_string(&out)
            .unwrap()
            .starts_with("Fp1,Fp2,")
    );
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&rep).unwrap()).unwrap();
    assert_eq!(r["converged"], true);
    assert_eq!(r["coverage"].as_array().unwrap().len(), 24);
}

// Common practice, no source: the same seed gives byte-identical simulated files,
// and the committed demo data is what `lacuna synth --out demo-data` writes.
#[test]
fn synth_is_deterministic_and_reproduces_demo_data() {
    let d = Dir::new("synth");
    let out = d.path("demo");
    assert_eq!(lacuna(&["synth", "--out", s(&out)]).0, 0);
    let root = env!("CARGO_MANIFEST_DIR");
    for f in ["covs.npy", "mask.csv", "truth-rest.npy", "labels.csv"] {
        let committed = std::fs::read(format!("{root}/demo-data/{f}")).unwrap();
        assert_eq!(
            std::fs::read(out.join(f)).unwrap(),
            committed,
            "{f} differs from demo-data"
        );
    }
}

//! End-to-end tests of `lacuna extract` and `lacuna synth --scenario recording`.

mod common;

use common::{Dir, extract_demo, lacuna, s};
use std::path::Path;

fn demo(f: &str) -> String {
    format!("{}/demo-data/recording/{f}", env!("CARGO_MANIFEST_DIR"))
}

fn read_csv_rows(path: &Path) -> Vec<Vec<String>> {
    std::fs::read_to_string(path)
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| l.split(',').map(str::to_string).collect())
        .collect()
}

// The README's first command: demo recordings → trial set → masked mean.
// The mask must agree with the simulator's truth (precision and recall ≥ 0.95,
// the acceptance figures; common practice, no source).
#[test]
fn readme_whole_path_on_demo_recordings() {
    let d = Dir::new("readme");
    let trials = d.path("trials");
    let (code, out, err) = extract_demo(&trials, &["--mask-report", s(&d.path("masked.csv"))]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("90 epochs × 24 channels"), "{out}");
    let mask = read_csv_rows(&trials.join("mask.csv"));
    let truth = read_csv_rows(Path::new(&demo("truth-mask.csv")));
    assert_eq!(mask.len(), truth.len());
    let (mut tp, mut fp, mut fneg) = (0, 0, 0);
    for (m, t) in mask.iter().flatten().zip(truth.iter().flatten()) {
        match (m.as_str(), t.as_str()) {
            ("0", "0") => tp += 1,
            ("0", "1") => fp += 1,
            ("1", "0") => fneg += 1,
            _ => {}
        }
    }
    let (precision, recall) = (tp as f64 / (tp + fp) as f64, tp as f64 / (tp + fneg) as f64);
    assert!(
        precision >= 0.95 && recall >= 0.95,
        "precision {precision} recall {recall}"
    );
    // Every masked cell is in the mask report with its reason.
    assert_eq!(read_csv_rows(&d.path("masked.csv")).len(), tp + fp);
    let labels = read_csv_rows(&trials.join("labels.csv"));
    let true_labels = read_csv_rows(Path::new(&demo("truth-labels.csv")));
    assert_eq!(
        labels.iter().map(|r| &r[0]).collect::<Vec<_>>(),
        true_labels.iter().map(|r| &r[0]).collect::<Vec<_>>()
    );
    let meta: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(trials.join("epochs.json")).unwrap())
            .unwrap();
    assert_eq!(meta["channels"].as_array().unwrap().len(), 24);
    assert_eq!(meta["epochs"].as_array().unwrap().len(), 90);
    assert_eq!(meta["estimator"], "oas");
    let shrink = meta["epochs"][0]["shrinkage"].as_f64().unwrap();
    assert!(shrink > 0.0 && shrink < 1.0);
    // The stack is accepted by the masked mean.
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&trials.join("covs.npy")),
        "--mask",
        s(&trials.join("mask.csv")),
        "--scheme",
        "airm-observed",
        "--out",
        s(&d.path("mean.csv")),
        "--report",
        s(&d.path("r.json")),
    ]);
    assert_eq!(code, 0, "{err}");
    let r: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(d.path("r.json")).unwrap()).unwrap();
    assert_eq!(r["converged"], true);
}

// Common practice, no source: the recording scenario is deterministic and the
// committed demo recordings are what `lacuna synth --scenario recording` writes.
#[test]
fn synth_recording_reproduces_demo_data() {
    let d = Dir::new("synth");
    let out = d.path("rec");
    let (code, _, err) = lacuna(&["synth", "--scenario", "recording", "--out", s(&out)]);
    assert_eq!(code, 0, "{err}");
    for f in [
        "session-1.edf",
        "session-3.edf",
        "events-2.csv",
        "truth-mask.csv",
        "truth-rest.npy",
        "positions.csv",
    ] {
        assert_eq!(
            std::fs::read(out.join(f)).unwrap(),
            std::fs::read(demo(f)).unwrap(),
            "{f} differs from demo-data/recording"
        );
    }
}

// NPY epochs with NaN samples: the lost cells are masked as non-finite, and
// the result is a valid trial set.
#[test]
fn npy_epochs_with_lost_samples() {
    let d = Dir::new("npy");
    let rec = d.path("rec");
    let (code, _, err) = lacuna(&[
        "synth",
        "--scenario",
        "recording",
        "--format",
        "npy",
        "--sessions",
        "1",
        "--trials",
        "20",
        "--out",
        s(&rec),
        "--seed",
        "5",
    ]);
    assert_eq!(code, 0, "{err}");
    let (code, out, err) = lacuna(&[
        "extract",
        "--epochs",
        s(&rec.join("epochs.npy")),
        "--rate",
        "256",
        "--band",
        "8-30",
        "--out",
        s(&d.path("t")),
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let summary: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(summary["epochs"], 20);
    let truth = std::fs::read_to_string(rec.join("truth-faults.csv")).unwrap();
    if truth.contains(",lost") {
        assert!(
            summary["reasons"]["missing-samples"].as_u64().unwrap() > 0,
            "{summary}"
        );
    }
}

// A user mask replaces detection; --bad masks a channel everywhere.
#[test]
fn user_mask_and_bad_channels() {
    let d = Dir::new("user");
    let s1 = demo("session-1.edf");
    // Columns are matched by channel name (the recording's).
    let names = std::fs::read_to_string(demo("truth-mask.csv")).unwrap();
    let mut mask = names.lines().next().unwrap().to_string();
    mask.push('\n');
    for e in 0..30 {
        let row: Vec<&str> = (0..24)
            .map(|c| if c == e % 24 { "0" } else { "1" })
            .collect();
        mask.push_str(&row.join(","));
        mask.push('\n');
    }
    let m = d.write("mask.csv", mask.as_bytes());
    let (code, out, err) = lacuna(&[
        "extract",
        &s1,
        "--offset",
        "0.5",
        "--length",
        "2",
        "--mask",
        s(&m),
        "--out",
        s(&d.path("t")),
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["masked_cells"], 30);
    assert_eq!(v["reasons"]["user"], 30);
    let (code, out, err) = lacuna(&[
        "extract",
        &s1,
        "--offset",
        "0.5",
        "--length",
        "2",
        "--bad",
        "Cz",
        "--no-detect",
        "--out",
        s(&d.path("t2")),
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["reasons"]["user"], 30);
}

fn assert_refused(args: &[&str], out_dir: &Path, needles: &[&str]) {
    let (code, _, err) = lacuna(args);
    assert_eq!(code, 3, "{args:?}: {err}");
    for n in needles {
        assert!(
            err.contains(n),
            "{args:?}: message should name {n:?}: {err}"
        );
    }
    assert!(!out_dir.exists(), "nothing may be written on bad input");
}

// Bad input: exit 3, a message naming the file and the place, nothing written.
#[test]
fn bad_recordings_are_refused() {
    let d = Dir::new("bad");
    let out = d.path("never");
    let good = std::fs::read(demo("session-1.edf")).unwrap();
    // Truncated: the header promises 96 records, the file is cut mid-way.
    let cut = d.write("cut.edf", &good[..good.len() / 2]);
    assert_refused(
        &["extract", s(&cut), "--length", "2", "--out", s(&out)],
        &out,
        &["cut.edf", "truncated"],
    );
    // Header too short to hold its own signal headers.
    let short = d.write("short.edf", &good[..300]);
    assert_refused(
        &["extract", s(&short), "--length", "2", "--out", s(&out)],
        &out,
        &["short.edf", "header"],
    );
    // Inconsistent: bytes-in-header field disagrees with the signal count.
    let mut bad = good.clone();
    bad[184..192].copy_from_slice(b"1024    ");
    let bad = d.write("hdr.edf", &bad);
    assert_refused(
        &["extract", s(&bad), "--length", "2", "--out", s(&out)],
        &out,
        &["hdr.edf", "inconsistent"],
    );
    // Zero samples per record for a signal.
    let mut spr = good.clone();
    let ns = 25; // 24 electrodes + annotations
    let field = 256 + 216 * ns;
    spr[field..field + 8].copy_from_slice(b"0       ");
    let spr = d.write("spr.edf", &spr);
    assert_refused(
        &["extract", s(&spr), "--length", "2", "--out", s(&out)],
        &out,
        &["spr.edf", "samples per record"],
    );
    // Events outside the recording.
    let ev = d.write(
        "events.csv",
        b"onset,duration,label\n1.0,2,rest\n500.0,2,task\n",
    );
    let s1 = demo("session-1.edf");
    assert_refused(
        &[
            "extract",
            &s1,
            "--events",
            s(&ev),
            "--length",
            "2",
            "--out",
            s(&out),
        ],
        &out,
        &["outside the recording", "event 2"],
    );
    // A channel that does not exist.
    assert_refused(
        &[
            "extract",
            &s1,
            "--length",
            "2",
            "--channels",
            "Cz,Q9",
            "--out",
            s(&out),
        ],
        &out,
        &["Q9", "does not exist"],
    );
    // A band above Nyquist (256 Hz sampling).
    assert_refused(
        &[
            "extract",
            &s1,
            "--length",
            "2",
            "--band",
            "8-200",
            "--out",
            s(&out),
        ],
        &out,
        &["session-1.edf", "Nyquist"],
    );
    // Non-numeric CSV cell: row and column named.
    let csv = d.write("rec.csv", b"A,B,C\n1,2,3\n4,x5,6\n");
    assert_refused(
        &[
            "extract",
            s(&csv),
            "--rate",
            "100",
            "--window",
            "0.01",
            "--out",
            s(&out),
        ],
        &out,
        &["rec.csv", "row 3", "column 2", "channel B"],
    );
    // Non-numeric events cell.
    let ev = d.write("ev2.csv", b"onset,duration,label\nsoon,2,rest\n");
    assert_refused(
        &[
            "extract",
            &s1,
            "--events",
            s(&ev),
            "--length",
            "2",
            "--out",
            s(&out),
        ],
        &out,
        &["ev2.csv", "row 2", "onset"],
    );
}

// A continuous CSV recording with an events CSV, through the whole path;
// an EDF file with a channel at another rate reports it as set aside.
#[test]
fn csv_recording_with_events_and_set_aside_channels() {
    use lacuna::simulate::rng::Rng;
    let d = Dir::new("csv");
    let mut rng = Rng::new(3);
    let (fs, secs, p) = (100.0, 30.0, 5);
    let n = (fs * secs) as usize;
    let mut text = String::from("A,B,C,D,E\n");
    let shared: Vec<f64> = (0..n).map(|_| rng.normal()).collect();
    for (i, sh) in shared.iter().enumerate() {
        let t = i as f64 / fs;
        let row: Vec<String> = (0..p)
            .map(|c| {
                let v = 10.0 * (2.0 * std::f64::consts::PI * 10.0 * t + c as f64).sin()
                    + 5.0 * sh
                    + rng.normal();
                format!("{v:.5}")
            })
            .collect();
        text.push_str(&row.join(","));
        text.push('\n');
    }
    let rec = d.write("run.csv", text.as_bytes());
    let mut ev = String::from("onset,duration,label\n");
    for k in 0..12 {
        ev.push_str(&format!(
            "{},2,{}\n",
            2.0 + 2.0 * k as f64,
            if k % 2 == 0 { "left" } else { "right" }
        ));
    }
    let ev = d.write("events.csv", ev.as_bytes());
    let (code, out, err) = lacuna(&[
        "extract",
        s(&rec),
        "--rate",
        "100",
        "--events",
        s(&ev),
        "--band",
        "5-20",
        "--labels",
        "left",
        "--out",
        s(&d.path("t")),
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["epochs"], 6, "{v}");
    let labels = std::fs::read_to_string(d.path("t/labels.csv")).unwrap();
    assert_eq!(labels.lines().filter(|l| l.starts_with("left,")).count(), 6);
    // The pyedflib fixture has AUX at 32 Hz beside four 256 Hz channels.
    let fx = format!(
        "{}/tests/reference/fixtures/sines.edf",
        env!("CARGO_MANIFEST_DIR")
    );
    let (code, out, err) = lacuna(&[
        "extract",
        &fx,
        "--window",
        "2",
        "--no-detect",
        "--out",
        s(&d.path("t2")),
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["epochs"], 5);
    assert!(
        v["set_aside"][0]
            .as_str()
            .unwrap()
            .starts_with("AUX (32 Hz"),
        "{v}"
    );
}

// `lacuna compare` on the demo recordings' trial set: every scheme runs, a
// recommendation with reasons is written, each mean is saved, bad labels
// are refused before anything is written.
#[test]
fn compare_on_demo_trials() {
    let d = Dir::new("compare");
    let trials = d.path("trials");
    let (code, _, err) = extract_demo(&trials, &["--quiet"]);
    assert_eq!(code, 0, "{err}");
    let out = d.path("cmp");
    let (code, stdout, err) = lacuna(&[
        "compare",
        "--covs",
        s(&trials.join("covs.npy")),
        "--mask",
        s(&trials.join("mask.csv")),
        "--labels",
        s(&trials.join("labels.csv")),
        "--positions",
        &demo("positions.csv"),
        "--repeats",
        "6",
        "--bootstrap",
        "4",
        "--out",
        s(&out),
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let schemes = v["schemes"].as_array().unwrap();
    assert_eq!(schemes.len(), 12);
    assert!(schemes.iter().all(|s| s["status"] == "ok"), "{schemes:#?}");
    assert_eq!(v["recommendation"]["scheme"], "airm-observed");
    assert!(v["recommendation"]["reasons"].as_array().unwrap().len() >= 3);
    assert!(v["decoding"]["scores"].as_array().unwrap().len() == 12);
    assert_eq!(v["contributions"].as_array().unwrap().len(), 24);
    for f in [
        "comparison.csv",
        "distances.csv",
        "validation.csv",
        "contributions.csv",
        "compare.json",
        "means/airm-observed.npy",
        "means/gaussian-em.csv",
    ] {
        assert!(out.join(f).exists(), "{f} missing");
    }
    // Distances are symmetric with a zero diagonal.
    let m = &v["distances"]["matrix"];
    for i in 0..12 {
        assert_eq!(m[i][i].as_f64(), Some(0.0));
        for j in 0..12 {
            let (a, b) = (m[i][j].as_f64().unwrap(), m[j][i].as_f64().unwrap());
            assert!((a - b).abs() <= 1e-9 * a.max(1.0), "{i},{j}: {a} vs {b}");
        }
    }
    // Bad labels file: exit 3, nothing written.
    let bad = d.write("labels.csv", b"label\nrest\ntask\n");
    let never = d.path("never");
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&trials.join("covs.npy")),
        "--mask",
        s(&trials.join("mask.csv")),
        "--labels",
        s(&bad),
        "--out",
        s(&never),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("labels.csv") && err.contains("2 label rows for 90 trials"),
        "{err}"
    );
    assert!(!never.exists());
    // Unknown scheme: a usage error.
    let (code, _, _) = lacuna(&[
        "compare",
        "--covs",
        s(&trials.join("covs.npy")),
        "--mask",
        s(&trials.join("mask.csv")),
        "--schemes",
        "nonsense",
        "--out",
        s(&never),
    ]);
    assert_eq!(code, 2);
}

//! What a new user meets first: defaults that agree between commands, one
//! convention for output streams, extensions that mean what they say, and
//! commands that say where their outputs went. Common practice, no source.

mod common;

use common::{Dir, lacuna, s};

fn demo(f: &str) -> String {
    format!("{}/demo-data/{f}", env!("CARGO_MANIFEST_DIR"))
}

// `mean` and `compare` share the default tolerance, so the same scheme on
// the same trials gives the same mean, bit for bit.
#[test]
fn mean_and_compare_agree_by_default() {
    let d = Dir::new("newcomer-defaults");
    let (covs, mask) = (demo("covs.npy"), demo("mask.csv"));
    let m = d.path("m.npy");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &covs,
        "--mask",
        &mask,
        "--out",
        s(&m),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let out = d.path("cmp");
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        &covs,
        "--mask",
        &mask,
        "--schemes",
        "airm-observed",
        "--no-validation",
        "--no-leave-out",
        "--bootstrap",
        "0",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let a = std::fs::read(&m).unwrap();
    let b = std::fs::read(out.join("means/airm-observed.npy")).unwrap();
    assert_eq!(a, b, "the two commands' means differ");
}

// Results and summaries on stdout; progress, warnings and errors on stderr;
// --quiet leaves stdout empty; --json leaves only JSON on stdout.
#[test]
fn one_convention_for_output_streams() {
    let d = Dir::new("newcomer-streams");
    let (covs, mask) = (demo("covs.npy"), demo("mask.csv"));
    let m = d.path("m.csv");
    let (code, out, err) = lacuna(&["mean", "--covs", &covs, "--mask", &mask, "--out", s(&m)]);
    assert_eq!(code, 0, "{err}");
    assert!(
        out.contains("converged after") && out.contains("wrote"),
        "{out}"
    );
    assert!(!err.contains("converged after"), "{err}");
    let (_, out, _) = lacuna(&[
        "mean",
        "--covs",
        &covs,
        "--mask",
        &mask,
        "--out",
        s(&m),
        "--quiet",
    ]);
    assert!(out.is_empty(), "{out}");
    let (_, out, _) = lacuna(&[
        "mean",
        "--covs",
        &covs,
        "--mask",
        &mask,
        "--out",
        s(&m),
        "--json",
    ]);
    let v: serde_json::Value = serde_json::from_str(&out).expect("only JSON on stdout");
    assert_eq!(v["converged"], true);
    assert!(
        v["caution"]
            .as_str()
            .unwrap()
            .contains("not a medical device")
    );
    assert!(v["pattern_log_det"][0]["channels"][0].is_string());
}

// An output extension lacuna would not honour is a usage error naming the
// accepted ones; nothing is written.
#[test]
fn unknown_mean_extension_is_refused() {
    let d = Dir::new("newcomer-ext");
    for name in ["m.txt", "m", "m.npz"] {
        let out = d.path(name);
        let (code, _, err) = lacuna(&[
            "mean",
            "--covs",
            &demo("covs.npy"),
            "--mask",
            &demo("mask.csv"),
            "--out",
            s(&out),
        ]);
        assert_eq!(code, 2, "{name}: {err}");
        assert!(err.contains(".npy") && err.contains(".csv"), "{err}");
        assert!(!out.exists());
    }
}

// compare says where the page went; report finds epochs.json beside the
// trial set when not given, and says when it has none.
#[test]
fn outputs_are_announced_and_epochs_found() {
    let d = Dir::new("newcomer-report");
    let trials = d.path("trials");
    let (code, _, err) = common::extract_demo(&trials, &["--quiet"]);
    assert_eq!(code, 0, "{err}");
    let (cmp, html) = (d.path("cmp"), d.path("page.html"));
    let covs = trials.join("covs.npy");
    let mask = trials.join("mask.csv");
    let (code, out, err) = lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--schemes",
        "airm-observed,shrinkage",
        "--no-validation",
        "--no-leave-out",
        "--bootstrap",
        "0",
        "--out",
        s(&cmp),
        "--html",
        s(&html),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains(&format!("wrote {}", html.display())), "{out}");
    let page = d.path("again.html");
    let (code, out, err) = lacuna(&["report", "--compare", s(&cmp), "--out", s(&page)]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("found beside the trial set"), "{out}");
    let text = std::fs::read_to_string(&page).unwrap();
    assert!(text.contains("Dropout raster"));
    std::fs::remove_file(trials.join("epochs.json")).unwrap();
    let (code, out, _) = lacuna(&["report", "--compare", s(&cmp), "--out", s(&page)]);
    assert_eq!(code, 0);
    assert!(out.contains("no dropout raster"), "{out}");
}

// The standard systems work from the command line and name what they lack.
#[test]
fn standard_positions_from_the_command_line() {
    let d = Dir::new("newcomer-positions");
    let out = d.path("m.npy");
    let base = [
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--scheme",
        "spherical-spline",
        "--quiet",
    ];
    let mut args = base.to_vec();
    args.extend(["--positions", "10-10", "--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 0, "{err}");
    let mut args = base.to_vec();
    args.extend(["--positions", "10-20", "--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("no standard 10-20 position") && err.contains("FC5"),
        "{err}"
    );
}

// Hostile values of compare's grid and α are usage errors naming the flag
// (exit 2, nothing written). Common practice, no source.
#[test]
fn compare_grid_and_alpha_are_checked() {
    let d = Dir::new("newcomer-grid");
    let out = d.path("cmp");
    for (flag, value) in [
        ("--loading-grid", "NaN"),
        ("--loading-grid", "inf"),
        ("--loading-grid", "-1e-3"),
        ("--loading-grid", "1e7"),
        ("--loading-grid", "1e-2,1e-2"),
        ("--loading-grid", ""),
        ("--shrinkage", "0"),
        ("--shrinkage", "1.5"),
        ("--shrinkage", "NaN"),
    ] {
        let (code, _, err) = lacuna(&[
            "compare",
            "--covs",
            &demo("covs.npy"),
            "--mask",
            &demo("mask.csv"),
            flag,
            value,
            "--out",
            s(&out),
            "--quiet",
        ]);
        assert_eq!(code, 2, "{flag} {value}: {err}");
        assert!(err.contains(flag), "{flag} {value}: {err}");
        assert!(!out.exists());
    }
}

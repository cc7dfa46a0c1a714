//! The command line under random and hostile option values: for every
//! numeric option of every subcommand, NaN, infinities, negatives, zero,
//! huge, tiny and empty values. Each run must end within its time limit with
//! exit 0, 2, 3 or 4 and never panic (common practice, no source).
//! `LACUNA_CLI_FUZZ_ROUNDS=N` adds N rounds of random values per option.

mod common;

use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use common::{Dir, demo_recording, s};
use lacuna::simulate::rng::Rng;

fn demo(f: &str) -> String {
    format!("{}/demo-data/{f}", env!("CARGO_MANIFEST_DIR"))
}

const HOSTILE: [&str; 10] = [
    "nan",
    "inf",
    "-inf",
    "-1",
    "0",
    "1e308",
    "1e-308",
    "",
    "18446744073709551616",
    "7e16",
];

/// Runs the binary with a time limit; returns (exit code, stderr).
fn run(args: &[String], limit: Duration) -> (Option<i32>, String) {
    let mut child = Command::new(env!("CARGO_BIN_EXE_lacuna"))
        .args(args)
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let start = Instant::now();
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            let mut err = String::new();
            use std::io::Read;
            child
                .stderr
                .take()
                .unwrap()
                .read_to_string(&mut err)
                .unwrap();
            return (status.code(), err);
        }
        if start.elapsed() > limit {
            let _ = child.kill();
            let _ = child.wait();
            return (None, format!("timed out after {limit:?}"));
        }
        std::thread::sleep(Duration::from_millis(5));
    }
}

fn random_value(rng: &mut Rng) -> String {
    match rng.below(6) {
        0 => format!("{}", rng.normal() * 10f64.powi(rng.below(40) as i32 - 20)),
        1 => format!("{}", rng.below(1 << 20)),
        2 => format!("-{}", rng.below(1000)),
        3 => format!("{:e}", 10f64.powi(rng.below(600) as i32 - 300)),
        4 => HOSTILE[rng.below(HOSTILE.len())].to_string(),
        _ => "abc".into(),
    }
}

#[test]
fn numeric_options_never_panic_or_hang() {
    let d = Dir::new("clifuzz");
    let rec = demo_recording("session-1.edf");
    let covs = demo("covs.npy");
    let mask = demo("mask.csv");
    // (base arguments, numeric options, time limit)
    let cases: Vec<(Vec<String>, Vec<&str>, u64)> = vec![
        (
            vec![
                "mean",
                "--covs",
                &covs,
                "--mask",
                &mask,
                "--out",
                s(&d.path("m.npy")),
            ]
            .into_iter()
            .map(String::from)
            .collect(),
            vec![
                "--tol",
                "--max-iter",
                "--starts",
                "--seed",
                "--loading",
                "--shrinkage",
                "--samples",
                "--rank",
                "--threads",
                "--effective-samples",
            ],
            20,
        ),
        (
            vec![
                "extract",
                &rec,
                "--offset",
                "0.5",
                "--length",
                "2",
                "--out",
                s(&d.path("t")),
            ]
            .into_iter()
            .map(String::from)
            .collect(),
            vec![
                "--offset",
                "--length",
                "--order",
                "--z-threshold",
                "--min-correlation",
                "--flat-ratio",
                "--rail-fraction",
                "--rate",
            ],
            20,
        ),
        (
            vec![
                "synth",
                "--scenario",
                "uniform",
                "--trials",
                "20",
                "--out",
                s(&d.path("s")),
            ]
            .into_iter()
            .map(String::from)
            .collect(),
            vec![
                "--trials",
                "--channels",
                "--samples",
                "--dropout",
                "--max-lost",
                "--condition",
                "--seed",
            ],
            20,
        ),
        (
            vec![
                "compare",
                "--covs",
                &covs,
                "--mask",
                &mask,
                "--schemes",
                "airm-observed,shrinkage",
                "--no-leave-out",
                "--out",
                s(&d.path("c")),
                "--quiet",
            ]
            .into_iter()
            .map(String::from)
            .collect(),
            vec!["--repeats", "--folds", "--bootstrap", "--tol", "--samples"],
            60,
        ),
    ];
    let rounds: usize = std::env::var("LACUNA_CLI_FUZZ_ROUNDS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(0);
    let mut rng = Rng::new(7);
    let mut runs = 0;
    for (base, options, limit) in &cases {
        for opt in options {
            let mut values: Vec<String> = HOSTILE.iter().map(|v| v.to_string()).collect();
            values.extend((0..rounds).map(|_| random_value(&mut rng)));
            for v in values {
                let mut args = base.clone();
                // `--opt=value` so that negative numbers stay values.
                args.push(format!("{opt}={v}"));
                let (code, err) = run(&args, Duration::from_secs(*limit));
                runs += 1;
                assert!(!err.contains("panicked"), "{args:?}: {err}");
                assert!(
                    matches!(code, Some(0 | 2 | 3 | 4)),
                    "{args:?}: exit {code:?}: {err}"
                );
            }
        }
    }
    assert!(runs >= 300, "{runs} runs");
}

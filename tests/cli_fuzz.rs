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
                "--amplitude-z",
                "--broadband-z",
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
            vec![
                "--repeats",
                "--folds",
                "--bootstrap",
                "--leave-out-trials",
                "--tol",
                "--samples",
            ],
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

/// One random structural mutation of a JSON document: a value replaced by
/// another type, an array shortened or lengthened, a key removed.
fn mutate_json(v: &mut serde_json::Value, rng: &mut Rng, depth: usize) {
    use serde_json::Value;
    let replace = |rng: &mut Rng| -> Value {
        match rng.below(7) {
            0 => Value::Null,
            1 => serde_json::json!(-1),
            2 => serde_json::json!(1e308),
            3 => serde_json::json!("x"),
            4 => serde_json::json!([]),
            5 => serde_json::json!({}),
            _ => serde_json::json!([[0, 999], [-1, 0]]),
        }
    };
    match v {
        Value::Object(map) if !map.is_empty() => {
            let keys: Vec<String> = map.keys().cloned().collect();
            let k = &keys[rng.below(keys.len())];
            match rng.below(4) {
                0 => {
                    map.remove(k);
                }
                1 => {
                    map.insert(k.clone(), replace(rng));
                }
                _ if depth < 6 => mutate_json(map.get_mut(k).unwrap(), rng, depth + 1),
                _ => {}
            }
        }
        Value::Array(a) if !a.is_empty() => match rng.below(4) {
            0 => {
                a.pop();
            }
            1 => {
                let x = a[0].clone();
                a.push(x);
            }
            _ if depth < 6 => {
                let i = rng.below(a.len());
                mutate_json(&mut a[i], rng, depth + 1)
            }
            _ => {}
        },
        other => *other = replace(rng),
    }
}

// `lacuna report --compare` on mutated compare.json documents (and epochs.json):
// exit 0 or 3, never a panic or a hang (common practice, no source).
#[test]
fn report_survives_mutated_json() {
    let d = Dir::new("jsonfuzz");
    let (covs, mask) = common::write_masked_set(&d, 30, 5, 8);
    let cmp = d.path("cmp");
    let (code, _, err) = common::lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--schemes",
        "airm-observed,shrinkage",
        "--no-leave-out",
        "--repeats",
        "2",
        "--out",
        s(&cmp),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let original = common::read_json(cmp.join("compare.json"));
    let rounds: usize = std::env::var("LACUNA_CLI_FUZZ_ROUNDS")
        .ok()
        .and_then(|v| v.parse().ok())
        .map_or(60, |r: usize| r * 20);
    let mut rng = Rng::new(11);
    let dir = d.path("mut");
    std::fs::create_dir_all(&dir).unwrap();
    for _ in 0..rounds {
        let mut doc = original.clone();
        for _ in 0..1 + rng.below(3) {
            mutate_json(&mut doc, &mut rng, 0);
        }
        std::fs::write(dir.join("compare.json"), doc.to_string()).unwrap();
        let args: Vec<String> = vec![
            "report".into(),
            "--compare".into(),
            s(&dir).into(),
            "--out".into(),
            s(&d.path("r.html")).into(),
        ];
        let (code, err) = run(&args, Duration::from_secs(10));
        assert!(!err.contains("panicked"), "{doc}: {err}");
        assert!(matches!(code, Some(0 | 3)), "exit {code:?}: {err}");
    }
}

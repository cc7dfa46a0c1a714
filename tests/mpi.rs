//! `mpirun -n K lacuna mean` (feature `mpi`; .ci/run installs Open MPI).
//! Common practice, no source: the evaluation is summed exactly (fixed
//! point) per shard, so 1, 2 and 4 processes must give the same mean bit for
//! bit, and the single-process mean of the concatenated stack up to rounding.
#![cfg(feature = "mpi")]

mod common;

use std::time::{Duration, Instant};

use common::{Dir, demo, lacuna, read_json, s};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::trials::TrialSet;
use lacuna::trials::io::{encode_mask_csv, encode_stack_with_nan};

/// Runs `mpirun -n k lacuna <args>`, killed after 120 s (a hang fails the test).
fn mpirun(k: usize, args: &[&str]) -> (i32, String, String) {
    let mut child = std::process::Command::new("mpirun")
        .args(["--oversubscribe", "--bind-to", "none", "-n", &k.to_string()])
        .arg(env!("CARGO_BIN_EXE_lacuna"))
        .args(args)
        .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
        .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
        .env("OMPI_MCA_btl_vader_single_copy_mechanism", "none")
        .stdout(std::process::Stdio::piped())
        .stderr(std::process::Stdio::piped())
        .spawn()
        .expect("mpirun on PATH (Debian: openmpi-bin)");
    let start = Instant::now();
    loop {
        if let Some(status) = child.try_wait().unwrap() {
            let out = child.wait_with_output().unwrap();
            return (
                status.code().unwrap_or(-1),
                String::from_utf8_lossy(&out.stdout).into(),
                String::from_utf8_lossy(&out.stderr).into(),
            );
        }
        if start.elapsed() > Duration::from_secs(120) {
            let _ = child.kill();
            panic!("mpirun -n {k} {args:?} did not finish in 120 s");
        }
        std::thread::sleep(Duration::from_millis(50));
    }
}

fn simulated(n: usize, p: usize, seed: u64) -> TrialSet {
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, 30.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 2 * p, &mut rng))
        .collect();
    masked_set(&full, random_dropout(n, p, 0.4, 3, &mut rng))
}

/// Writes `set` as `k` shards (stack + CSV mask); returns their patterns.
fn shards(d: &Dir, set: &TrialSet, k: usize) -> (String, String) {
    let n = set.len();
    for j in 0..k {
        let idx: Vec<usize> = (j * n / k..(j + 1) * n / k).collect();
        let part = set.select_trials(&idx).unwrap();
        d.write(&format!("shard-{j:02}.npy"), &encode_stack_with_nan(&part));
        d.write(&format!("shard-{j:02}.csv"), &encode_mask_csv(&part));
    }
    (
        s(&d.path("shard-*.npy")).to_string(),
        s(&d.path("shard-*.csv")).to_string(),
    )
}

fn airm(a: &std::path::Path, b: &std::path::Path) -> f64 {
    let read = |p: &std::path::Path| lacuna::trials::io::read_matrix(p).unwrap();
    lacuna::spd::airm_distance(&read(a), &read(b))
}

fn check_ranks_agree(d: &Dir, set: &TrialSet, n_shards: usize) {
    let (covs, masks) = shards(d, set, n_shards);
    let mut means = Vec::new();
    for k in [1, 2, 4] {
        let out = d.path(&format!("mean-{k}.npy"));
        let report = d.path(&format!("report-{k}.json"));
        let (code, stdout, err) = mpirun(
            k,
            &[
                "mean",
                "--covs",
                &covs,
                "--mask",
                &masks,
                "--out",
                s(&out),
                "--report",
                s(&report),
            ],
        );
        assert_eq!(code, 0, "{k} processes: {err}");
        // Only process 0 prints the summary.
        assert_eq!(stdout.matches("lacuna mean:").count(), 1, "{stdout}");
        let r = read_json(&report);
        assert_eq!(r["processes"], k);
        assert_eq!(r["n_trials"], set.len());
        assert_eq!(r["trials_per_process"].as_array().unwrap().len(), k);
        means.push(std::fs::read(&out).unwrap());
    }
    let first = d.path("mean-1.npy");
    assert_eq!(means[0], means[1], "1 and 2 processes differ");
    assert_eq!(means[0], means[2], "1 and 4 processes differ");
    // Reading the shards again at every evaluation changes nothing, nor
    // does the thread count.
    for (label, before, after) in [
        ("--stream", &[][..], &["--stream"][..]),
        ("--threads 1", &["--threads", "1"][..], &[][..]),
    ] {
        let out = d.path("mean-variant.npy");
        let mut args: Vec<&str> = before.to_vec();
        args.push("mean");
        args.extend_from_slice(after);
        args.extend(["--covs", &covs, "--mask", &masks, "--out", s(&out)]);
        let (code, _, err) = mpirun(2, &args);
        assert_eq!(code, 0, "{label}: {err}");
        assert_eq!(means[0], std::fs::read(&out).unwrap(), "{label} differs");
    }
    // The single-process mean of the same trials (not under mpirun).
    let whole = d.path("whole.npy");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &covs,
        "--mask",
        &masks,
        "--out",
        s(&whole),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let dist = airm(&first, &whole);
    assert!(dist < 1e-9, "distributed vs single process: {dist}");
}

#[test]
fn one_two_and_four_processes_agree_bit_for_bit_on_a_sharded_set() {
    let d = Dir::new("mpi-sim");
    check_ranks_agree(&d, &simulated(400, 10, 3), 5);
}

#[test]
fn one_two_and_four_processes_agree_bit_for_bit_on_the_demo() {
    let d = Dir::new("mpi-demo");
    let covs = demo("covs.npy");
    let mask = demo("mask.csv");
    let set = lacuna::trials::io::load_trial_set(
        std::path::Path::new(&covs),
        Some(std::path::Path::new(&mask)),
        None,
    )
    .unwrap();
    check_ranks_agree(&d, &set, 4);
}

#[test]
fn a_shard_with_other_channels_is_refused_on_every_process() {
    let d = Dir::new("mpi-channels");
    let set = simulated(60, 5, 4);
    let (covs, masks) = shards(&d, &set, 3);
    // Shard 1 (read by process 1 of 2) gets other channel names.
    let text = std::fs::read_to_string(d.path("shard-01.csv")).unwrap();
    let renamed = text.replacen("ch1", "Xq7", 1);
    assert_ne!(text, renamed);
    std::fs::write(d.path("shard-01.csv"), renamed).unwrap();
    refused_naming(&d, &covs, &masks, "shard-01.npy");
}

/// `mpirun -n 2 lacuna mean` on the shards: every process stops with exit 3
/// naming `culprit`, and nothing is written.
fn refused_naming(d: &Dir, covs: &str, masks: &str, culprit: &str) {
    let out = d.path("m.npy");
    let (code, _, err) = mpirun(
        2,
        &["mean", "--covs", covs, "--mask", masks, "--out", s(&out)],
    );
    assert_eq!(code, 3, "{err}");
    assert!(err.contains(culprit), "{err}");
    assert!(!out.exists());
}

#[test]
fn an_unreadable_shard_stops_every_process_without_a_hang() {
    let d = Dir::new("mpi-unreadable");
    let set = simulated(60, 5, 5);
    let (_, masks) = shards(&d, &set, 4);
    // Shard 3 (read by process 1 of 2) is cut short.
    let bytes = std::fs::read(d.path("shard-03.npy")).unwrap();
    std::fs::write(d.path("shard-03.npy"), &bytes[..bytes.len() / 2]).unwrap();
    let covs = s(&d.path("shard-*.npy")).to_string();
    refused_naming(&d, &covs, &masks, "shard-03.npy");
}

#[test]
fn options_a_distributed_run_cannot_honour_are_refused() {
    let d = Dir::new("mpi-options");
    let set = simulated(40, 4, 6);
    let (covs, masks) = shards(&d, &set, 2);
    let out = d.path("m.npy");
    for extra in [
        &["--scheme", "log-euclidean"][..],
        &["--starts", "3"],
        &["--regularize", "shrinkage:0.1"],
    ] {
        let mut args = vec!["mean", "--covs", &covs, "--mask", &masks, "--out", s(&out)];
        args.extend_from_slice(extra);
        let (code, _, err) = mpirun(2, &args);
        assert_eq!(code, 2, "{extra:?}: {err}");
        assert!(err.contains("not available in distributed runs"), "{err}");
    }
    // More processes than shards.
    let (code, _, err) = mpirun(
        3,
        &["mean", "--covs", &covs, "--mask", &masks, "--out", s(&out)],
    );
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("3 processes for 2 stack file(s)"), "{err}");
    assert!(!out.exists());
}

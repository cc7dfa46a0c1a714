//! Peak memory of the streamed masked mean (`mean --stream`) on a stack
//! larger than its 256 MiB target, against the same shards held in memory.
//! Each run is a child process, so its peak resident memory (VmHWM) is its
//! own; the shards are generated once into the temp folder.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use lacuna::distributed::Local;
use lacuna::distributed::sharded::{LocalShard, ShardedMeanJob};
use lacuna::schemes::InitRule;
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::solve::StopRule;
use lacuna::trials::shards::{Shard, ShardReader};

const SHARDS: usize = 2;

fn shard_paths(dir: &Path) -> Vec<PathBuf> {
    (0..SHARDS)
        .map(|j| dir.join(format!("shard-{j}.npy")))
        .collect()
}

/// Child: writes the shards (N trials × p channels, 4p samples each, 20 %
/// of trials missing 1–8 channels).
pub fn generate(dir: &Path, n: usize, p: usize) {
    std::fs::create_dir_all(dir).unwrap();
    let mut rng = Rng::new(21);
    let sigma = random_spd(p, 100.0, &mut rng);
    for (j, path) in shard_paths(dir).iter().enumerate() {
        let m = n / SHARDS + usize::from(j < n % SHARDS);
        let full: Vec<_> = (0..m)
            .map(|_| sample_covariance(&sigma, 4 * p, &mut rng))
            .collect();
        let set = masked_set(&full, random_dropout(m, p, 0.2, 8, &mut rng));
        std::fs::write(path, lacuna::trials::io::encode_stack_with_nan(&set)).unwrap();
    }
}

/// Child: one run, held or streamed; prints a JSON line.
pub fn measure(dir: &Path, streamed: bool) {
    let t = Instant::now();
    let mut shards = Vec::new();
    let mut channels = Vec::new();
    for (j, covs) in shard_paths(dir).into_iter().enumerate() {
        let reader = ShardReader::open(&Shard {
            covs,
            mask: None,
            weights: None,
        })
        .unwrap();
        channels = reader.channels().to_vec();
        shards.push(if streamed {
            LocalShard::streamed(j, reader)
        } else {
            LocalShard::held(j, &reader, lacuna::trials::shards::CHUNK_BYTES).unwrap()
        });
    }
    let job = ShardedMeanJob::new(
        StopRule {
            tol: 1e-10,
            max_iter: 500,
        },
        InitRule::AvailableCase,
    );
    let r = job.run(&Local, &channels, SHARDS, &shards, None).unwrap();
    let d = &r.result.diagnostics;
    let mean: Vec<f64> = r.result.mean.iter().copied().collect();
    let digest = mean
        .iter()
        .fold(0u64, |h, v| h.rotate_left(7) ^ v.to_bits());
    println!(
        "{}",
        serde_json::json!({
            "seconds": t.elapsed().as_secs_f64(),
            "iterations": d.iterations,
            "evaluations": d.evaluations,
            "converged": d.converged,
            "peak_rss_mib": super::ingest::peak_rss_mib(),
            "digest": format!("{digest:016x}"),
        })
    );
}

/// Parent: generate if needed, then one held and one streamed child.
pub fn run(n: usize, p: usize, file: Option<PathBuf>) {
    let dir =
        file.unwrap_or_else(|| std::env::temp_dir().join(format!("lacuna-bench-stream-{n}x{p}")));
    let me = std::env::current_exe().expect("own path");
    if !shard_paths(&dir).iter().all(|p| p.exists()) {
        let ok = Command::new(&me)
            .args([
                "--mode",
                "stream-generate",
                "--size",
                &format!("{n}x{p}"),
                "--file",
            ])
            .arg(&dir)
            .status()
            .expect("generate")
            .success();
        assert!(ok, "generation failed");
    }
    let bytes: u64 = shard_paths(&dir)
        .iter()
        .map(|p| std::fs::metadata(p).map(|m| m.len()).unwrap_or(0))
        .sum();
    println!(
        "stack: {n} trials × {p} channels in {SHARDS} shards, {:.0} MiB in all ({})",
        bytes as f64 / (1 << 20) as f64,
        dir.display()
    );
    println!(
        "| run | wall time (s) | iterations | evaluations | peak resident (MiB) | mean digest |"
    );
    println!("|---|---|---|---|---|---|");
    for (label, mode) in [("held", "stream-held"), ("streamed", "stream-streamed")] {
        let out = Command::new(&me)
            .args(["--mode", mode, "--file"])
            .arg(&dir)
            .output()
            .expect("measure");
        let text = String::from_utf8_lossy(&out.stdout);
        let Some(v) = text
            .lines()
            .find_map(|l| serde_json::from_str::<serde_json::Value>(l).ok())
        else {
            eprintln!("{label} failed: {}", String::from_utf8_lossy(&out.stderr));
            continue;
        };
        println!(
            "| {label} | {:.2} | {} | {} | {:.0} | {} |",
            v["seconds"].as_f64().unwrap_or(f64::NAN),
            v["iterations"],
            v["evaluations"],
            v["peak_rss_mib"].as_f64().unwrap_or(f64::NAN),
            v["digest"].as_str().unwrap_or("?")
        );
    }
}

//! The sharded masked mean (src/distributed) without MPI: one process
//! holding every shard. The MPI runs are in tests/mpi.rs (feature `mpi`).

mod common;

use lacuna::distributed::Local;
use lacuna::distributed::sharded::{LocalShard, ShardedMeanJob};
use lacuna::schemes::{AirmObserved, AveragingScheme, InitRule};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::solve::StopRule;
use lacuna::spd::airm_distance;
use lacuna::trials::TrialSet;

fn simulated(n: usize, p: usize, seed: u64) -> TrialSet {
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, 50.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 3 * p, &mut rng))
        .collect();
    masked_set(&full, random_dropout(n, p, 0.5, 3, &mut rng))
}

fn parts(set: &TrialSet, cuts: &[usize]) -> Vec<TrialSet> {
    let mut bounds = vec![0];
    bounds.extend_from_slice(cuts);
    bounds.push(set.len());
    bounds
        .windows(2)
        .map(|w| {
            set.select_trials(&(w[0]..w[1]).collect::<Vec<_>>())
                .unwrap()
        })
        .collect()
}

/// Chunks of 3 200 bytes: 6 trials at p = 8, so every shard has several.
const SMALL_CHUNKS: usize = 3200;

fn split(set: &TrialSet, cuts: &[usize]) -> Vec<LocalShard> {
    parts(set, cuts)
        .iter()
        .enumerate()
        .map(|(index, part)| LocalShard::from_set(index, part, SMALL_CHUNKS).unwrap())
        .collect()
}

/// The single-set masked mean to gradient 1e-11 (the reference).
fn whole_mean(set: &TrialSet) -> lacuna::MeanResult {
    AirmObserved
        .average(
            set,
            &lacuna::SchemeOptions {
                stop: StopRule {
                    tol: 1e-11,
                    max_iter: 500,
                },
                ..Default::default()
            },
        )
        .unwrap()
}

fn job(init: InitRule) -> ShardedMeanJob {
    let mut job = ShardedMeanJob::new(
        StopRule {
            tol: 1e-11,
            max_iter: 500,
        },
        init,
    );
    job.chunk_bytes = SMALL_CHUNKS;
    job
}

// Common practice, no source: the sum over shards is the sum over trials, so
// the sharded solve reaches the single-set masked mean (both to gradient
// 1e-11; they differ by rounding only: measured 1e-13 AIRM). Can fail.
#[test]
fn sharded_mean_equals_the_mean_of_the_whole_set() {
    let set = simulated(300, 8, 2);
    let whole = whole_mean(&set);
    for init in [InitRule::AvailableCase, InitRule::Diagonal] {
        for cuts in [vec![], vec![100], vec![17, 150, 151, 299]] {
            let shards = split(&set, &cuts);
            let r = job(init)
                .run(&Local, set.channels(), shards.len(), &shards, None)
                .unwrap();
            assert!(r.result.diagnostics.converged);
            assert_eq!(r.n_trials(), 300);
            let d = airm_distance(&r.result.mean, &whole.mean);
            assert!(d < 1e-9, "{cuts:?} {init:?}: {d}");
        }
    }
}

// The co-observation counts and never-observed pairs are those of the whole set.
#[test]
fn shard_counts_and_free_pairs_match_the_whole_set() {
    // Channels 0 and 1 are never observed together.
    let set = simulated(120, 5, 9);
    let trials: Vec<_> = set
        .trials()
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let drop = if i % 2 == 0 { 0 } else { 1 };
            let keep: Vec<usize> = (0..t.observed.len())
                .filter(|&k| t.observed[k] != drop)
                .collect();
            lacuna::trials::Trial {
                observed: keep.iter().map(|&k| t.observed[k]).collect(),
                block: lacuna::spd::sub_block(&t.block, &keep),
            }
        })
        .collect();
    let set = TrialSet::new(set.channels().to_vec(), trials, None, "t").unwrap();
    let shards = split(&set, &[40, 41]);
    let r = job(InitRule::AvailableCase)
        .run(&Local, set.channels(), 3, &shards, None)
        .unwrap();
    assert!(!r.streamed);
    let ident = lacuna::diagnose::identifiability(&set);
    assert_eq!(r.coobservation, ident.coobservation);
    assert_eq!(r.result.diagnostics.unconstrained_pairs, vec![[0, 1]]);
    assert_eq!(r.shard_trials, vec![40, 1, 79]);
}

// Common practice, no source: reading the shards again at every evaluation
// (streaming) sums the very same chunks as holding them, so the mean is the
// same bit for bit; and `mean --stream` on the command line writes it.
#[test]
fn streamed_shards_give_the_held_mean_bit_for_bit() {
    use common::{Dir, s};
    use lacuna::trials::shards::{Shard, ShardReader};
    let d = Dir::new("dist-stream");
    let set = simulated(260, 8, 12);
    let cuts = [90, 91];
    let mut held = Vec::new();
    let mut streamed = Vec::new();
    let mut covs = Vec::new();
    for (j, part) in parts(&set, &cuts).iter().enumerate() {
        let c = d.write(
            &format!("s{j}.npy"),
            &lacuna::trials::io::encode_stack_with_nan(part),
        );
        let m = d.write(
            &format!("s{j}.csv"),
            &lacuna::trials::io::encode_mask_csv(part),
        );
        let shard = Shard {
            covs: c.clone(),
            mask: Some(m),
            weights: None,
        };
        let reader = ShardReader::open(&shard).unwrap();
        held.push(LocalShard::held(j, &reader, SMALL_CHUNKS).unwrap());
        streamed.push(LocalShard::streamed(j, reader));
        covs.push(s(&c).to_string());
    }
    let a = job(InitRule::AvailableCase)
        .run(&Local, set.channels(), 3, &held, None)
        .unwrap();
    let b = job(InitRule::AvailableCase)
        .run(&Local, set.channels(), 3, &streamed, None)
        .unwrap();
    assert!(b.streamed && a.result.diagnostics.converged);
    assert_eq!(a.result.mean, b.result.mean);
    assert_eq!(
        a.result.diagnostics.iterations,
        b.result.diagnostics.iterations
    );

    // From the command line (default 32 MiB chunks): the masked mean.
    let out = d.path("m.npy");
    let report = d.path("m.json");
    let mut args = vec!["mean", "--stream", "--covs"];
    args.extend(covs.iter().map(String::as_str));
    args.extend(["--out", s(&out), "--report", s(&report), "--quiet"]);
    let (code, _, err) = common::lacuna(&args);
    assert_eq!(code, 0, "{err}");
    let m = lacuna::trials::io::read_matrix(&out).unwrap();
    let whole = AirmObserved.average(&set, &Default::default()).unwrap();
    assert!(airm_distance(&m, &whole.mean) < 1e-8);
    let r = common::read_json(&report);
    assert_eq!(r["n_trials"], 260);
    assert_eq!(r["processes"], 1);
}

// A shard changed on disk between passes (here: cut short after it was
// opened) stops the streamed run with that file's error, not a wrong mean.
#[test]
fn a_shard_that_breaks_during_streaming_is_an_error() {
    use common::Dir;
    use lacuna::trials::shards::{Shard, ShardReader};
    let d = Dir::new("dist-break");
    let set = simulated(120, 8, 13);
    let c = d.write("s.npy", &lacuna::trials::io::encode_stack_with_nan(&set));
    let reader = ShardReader::open(&Shard {
        covs: c.clone(),
        mask: None,
        weights: None,
    })
    .unwrap();
    let shards = vec![LocalShard::streamed(0, reader)];
    let bytes = std::fs::read(&c).unwrap();
    std::fs::write(&c, &bytes[..bytes.len() / 2]).unwrap();
    let err = job(InitRule::AvailableCase)
        .run(&Local, set.channels(), 1, &shards, None)
        .err()
        .expect("a truncated shard must fail");
    assert!(err.to_string().contains("s.npy"), "{err}");
}

// Started by an MPI launcher but built without MPI: refused (every process
// would otherwise compute and write the whole mean on its own).
#[cfg(not(feature = "mpi"))]
#[test]
fn mpirun_without_the_feature_is_refused() {
    use common::{Dir, s};
    let d = Dir::new("dist-nompi");
    let set = simulated(20, 4, 1);
    let covs = d.write("c.npy", &lacuna::trials::io::encode_stack_with_nan(&set));
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_lacuna"))
        .args(["mean", "--covs", s(&covs), "--out", s(&d.path("m.npy"))])
        .env("OMPI_COMM_WORLD_SIZE", "2")
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("built without MPI"), "{err}");
    assert!(!d.path("m.npy").exists());
    // One process under a launcher is an ordinary run.
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_lacuna"))
        .args([
            "mean",
            "--covs",
            s(&covs),
            "--out",
            s(&d.path("m.npy")),
            "--quiet",
        ])
        .env("OMPI_COMM_WORLD_SIZE", "1")
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0));
}

// Hostile input to `mean --stream`: the output is one of the shards, a shard
// holds a non-finite value, a shard is not float64 C-order — each refused
// naming the file, with nothing written.
#[test]
fn stream_refuses_bad_shards_and_writes_nothing() {
    use common::{Dir, lacuna, s};
    let d = Dir::new("dist-stream-bad");
    let set = simulated(40, 6, 14);
    let a = d.write("a.npy", &lacuna::trials::io::encode_stack_with_nan(&set));
    let before = std::fs::read(&a).unwrap();
    let (code, _, err) = lacuna(&["mean", "--stream", "--covs", s(&a), "--out", s(&a)]);
    assert_eq!(code, 2, "{err}");
    assert_eq!(std::fs::read(&a).unwrap(), before);

    let mut bytes = before.clone();
    let at = bytes.len() - 8;
    bytes[at..].copy_from_slice(&f64::INFINITY.to_le_bytes());
    let bad = d.write("bad.npy", &bytes);
    let out = d.path("m.npy");
    let (code, _, err) = lacuna(&[
        "mean",
        "--stream",
        "--covs",
        s(&a),
        s(&bad),
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("bad.npy"), "{err}");
    assert!(!out.exists());

    // float32 stacks are read whole by `mean`, but not streamed.
    let p = set.n_channels();
    let f32s: Vec<u8> = lacuna::trials::io::nan_stack(&set)
        .iter()
        .flat_map(|v| (*v as f32).to_le_bytes())
        .collect();
    let mut npy: Vec<u8> = Vec::new();
    let header = format!(
        "{{'descr': '<f4', 'fortran_order': False, 'shape': ({}, {p}, {p}), }}",
        set.len()
    );
    let pad = 64 - (10 + header.len() + 1) % 64;
    npy.extend_from_slice(b"\x93NUMPY\x01\x00");
    npy.extend_from_slice(&((header.len() + pad + 1) as u16).to_le_bytes());
    npy.extend_from_slice(header.as_bytes());
    npy.extend(std::iter::repeat_n(b' ', pad));
    npy.push(b'\n');
    npy.extend_from_slice(&f32s);
    let f4 = d.write("f4.npy", &npy);
    let (code, _, err) = lacuna(&["mean", "--stream", "--covs", s(&f4), "--out", s(&out)]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("f4.npy") && err.contains("float64"), "{err}");
    assert!(!out.exists());
    // …and the same file without --stream is accepted.
    let (code, _, err) = lacuna(&["mean", "--covs", s(&f4), "--out", s(&out), "--quiet"]);
    assert_eq!(code, 0, "{err}");
}

// Common practice, no source: weights travel with their trials. Shards with
// weights — one chunk weighing zero throughout — give the weighted mean of
// the whole set (to rounding; can fail if a chunk's weights were dropped,
// renormalised locally, or refused for summing to zero).
#[test]
fn weighted_shards_give_the_weighted_mean() {
    let mut set = simulated(200, 8, 15);
    let w: Vec<f64> = (0..200)
        .map(|i| if i < 12 { 0.0 } else { 0.25 + (i % 5) as f64 })
        .collect();
    set.set_weights(w).unwrap();
    let whole = whole_mean(&set);
    // The first chunk of shard 0 (6 trials at p = 8) weighs nothing.
    let shards = split(&set, &[70, 150]);
    let r = job(InitRule::AvailableCase)
        .run(&Local, set.channels(), 3, &shards, None)
        .unwrap();
    let d = airm_distance(&r.result.mean, &whole.mean);
    assert!(d < 1e-9, "weighted: {d}");
    // Unweighted, the mean differs clearly: the weights mattered.
    let mut flat = set.clone();
    flat.set_weights(vec![1.0; 200]).unwrap();
    let plain = AirmObserved.average(&flat, &Default::default()).unwrap();
    assert!(airm_distance(&plain.mean, &whole.mean) > 1e-3);
}

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

fn split(set: &TrialSet, cuts: &[usize]) -> Vec<LocalShard> {
    let mut bounds = vec![0];
    bounds.extend_from_slice(cuts);
    bounds.push(set.len());
    bounds
        .windows(2)
        .enumerate()
        .map(|(index, w)| LocalShard {
            index,
            set: set
                .select_trials(&(w[0]..w[1]).collect::<Vec<_>>())
                .unwrap(),
        })
        .collect()
}

fn job(init: InitRule) -> ShardedMeanJob {
    ShardedMeanJob {
        stop: StopRule {
            tol: 1e-11,
            max_iter: 500,
        },
        init,
    }
}

// Common practice, no source: the sum over shards is the sum over trials, so
// the sharded solve reaches the single-set masked mean (both to gradient
// 1e-11; they differ by rounding only: measured 1e-13 AIRM). Can fail.
#[test]
fn sharded_mean_equals_the_mean_of_the_whole_set() {
    let set = simulated(300, 7, 2);
    let whole = AirmObserved
        .average(
            &set,
            &lacuna::SchemeOptions {
                stop: StopRule {
                    tol: 1e-11,
                    max_iter: 500,
                },
                ..Default::default()
            },
        )
        .unwrap();
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
    let ident = lacuna::diagnose::identifiability(&set);
    assert_eq!(r.coobservation, ident.coobservation);
    assert_eq!(r.result.diagnostics.unconstrained_pairs, vec![[0, 1]]);
    assert_eq!(r.shard_trials, vec![40, 1, 79]);
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

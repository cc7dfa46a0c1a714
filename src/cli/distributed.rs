//! `lacuna mean` launched by `mpirun -n K`: every process reads its own
//! shards (shard j goes to process j mod K), the masked mean is solved by all
//! of them in step, and process 0 writes the mean and the report.
//! docs/scale.md says how to run it.

use std::path::PathBuf;
use std::time::Instant;

use lacuna::distributed::sharded::{LocalShard, ShardedMeanJob};
use lacuna::distributed::{Collective, owner};
use lacuna::trials::shards::{Shard, ShardReader};
use lacuna::{LacunaError, Result};

/// The settings of a distributed `mean`.
pub struct DistributedArgs {
    pub shards: Vec<Shard>,
    pub channels: Option<String>,
    pub out: PathBuf,
    pub report: Option<PathBuf>,
    pub json: bool,
    pub quiet: bool,
    /// Read the shards again at every evaluation instead of holding them.
    pub stream: bool,
    pub job: ShardedMeanJob,
}

/// The number of processes when this process was started by an MPI
/// launcher (Open MPI, MPICH/Hydra or PMIx), else None.
pub fn launched_processes() -> Option<usize> {
    ["OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMIX_SIZE"]
        .iter()
        .find_map(|v| std::env::var(v).ok()?.trim().parse().ok())
}

#[cfg(feature = "mpi")]
pub fn run(a: DistributedArgs) -> Result<i32> {
    let world = lacuna::distributed::mpi_world::MpiWorld::init()
        .ok_or_else(|| LacunaError::InvalidOption("MPI was already initialised".into()))?;
    run_on(&world, a)
}

#[cfg(not(feature = "mpi"))]
pub fn run(_a: DistributedArgs) -> Result<i32> {
    Err(LacunaError::InvalidOption(format!(
        "started by an MPI launcher with {} processes, but this lacuna was built without MPI: every process would compute the whole mean alone. Build it with `cargo build --release --features mpi` (docs/scale.md), or run it without mpirun",
        launched_processes().unwrap_or(0)
    )))
}

/// The error every process returns when one of them failed: the first
/// failing process's own error there, its message and exit code elsewhere.
fn agree(world: &dyn Collective, local: Result<()>) -> Result<()> {
    let message = match &local {
        Ok(()) => String::new(),
        Err(e) => format!(
            "{}\t{}",
            super::errors::exit_code(e),
            super::errors::describe(e)
        ),
    };
    let all = world.gather_messages(&message);
    let Some((rank, first)) = all.iter().enumerate().find(|(_, m)| !m.is_empty()) else {
        return Ok(());
    };
    if rank == world.rank() {
        return local;
    }
    let (code, text) = first.split_once('\t').unwrap_or(("3", first));
    Err(LacunaError::OnProcess {
        rank,
        exit_code: code.parse().unwrap_or(3),
        message: text.to_string(),
    })
}

/// A distributed run over `world` (any [`Collective`]: MPI, or one process
/// in tests).
pub fn run_on(world: &dyn Collective, a: DistributedArgs) -> Result<i32> {
    let started = Instant::now();
    let (rank, size) = (world.rank(), world.size());
    let n = a.shards.len();
    if size > n {
        return Err(LacunaError::InvalidOption(format!(
            "{size} processes for {n} stack file(s): each process needs at least one shard; start at most {n} processes or split the stack further"
        )));
    }
    // Outputs must differ from every input (all processes check the same).
    let inputs: Vec<(&str, &std::path::Path)> = a
        .shards
        .iter()
        .flat_map(|s| {
            std::iter::once(("--covs", s.covs.as_path()))
                .chain(s.mask.as_deref().map(|m| ("--mask", m)))
                .chain(s.weights.as_deref().map(|w| ("--weights", w)))
        })
        .collect();
    let mut outputs: Vec<(&str, &std::path::Path)> = vec![("--out", a.out.as_path())];
    if let Some(r) = &a.report {
        outputs.push(("--report", r));
    }
    lacuna::output::check_paths(&inputs, &outputs, &[])?;

    // Every process reads its own shards.
    let mut mine: Vec<LocalShard> = Vec::new();
    let loaded = (|| -> Result<()> {
        for (j, s) in a.shards.iter().enumerate() {
            if owner(j, size) != rank {
                continue;
            }
            let mut reader = ShardReader::open(s)?;
            if let Some(spec) = &a.channels {
                let (names, _) = super::channel_names(spec, s.mask.as_deref(), reader.channels())?;
                reader.set_channel_names(names)?;
            }
            mine.push(if a.stream {
                LocalShard::streamed(j, reader)
            } else {
                LocalShard::held(j, &reader, a.job.chunk_bytes)?
            });
        }
        Ok(())
    })();
    agree(world, loaded)?;

    // The shards must hold the same channels: compared by a digest of the
    // names against shard 0 (held by process 0).
    let digest = |names: &[String]| {
        use sha2::Digest;
        let mut h = sha2::Sha256::new();
        for n in names {
            h.update(n.as_bytes());
            h.update([0u8]);
        }
        format!("{:x}", h.finalize())
    };
    let own = mine
        .first()
        .map(|s| digest(&s.channels()))
        .unwrap_or_default();
    let reference = world.gather_messages(&own)[0].clone();
    let checked = (|| -> Result<()> {
        for s in &mine {
            if digest(&s.channels()) != reference {
                return Err(LacunaError::Format {
                    path: a.shards[s.index].covs.clone(),
                    message: format!(
                        "this shard's {} channels differ from those of the first shard ({}); shards must hold the same channels in the same order — pool different electrode sets by name with `lacuna merge`",
                        s.channels().len(),
                        a.shards[0].covs.display()
                    ),
                });
            }
        }
        Ok(())
    })();
    agree(world, checked)?;
    let channels = mine[0].channels();

    let show = rank == 0 && !a.quiet && std::io::IsTerminal::is_terminal(&std::io::stderr());
    let progress = |r: &lacuna::solve::IterRecord| {
        eprint!(
            "\r  iteration {:>4}  cost {:.6e}  gradient {:.3e}   ",
            r.iteration, r.cost, r.gradient_norm
        );
    };
    let observer: Option<&(dyn Fn(&lacuna::solve::IterRecord) + Sync)> =
        if show { Some(&progress) } else { None };
    let result = a.job.run(world, &channels, n, &mine, observer)?;
    if show {
        eprintln!();
    }
    let files: Vec<String> = a
        .shards
        .iter()
        .map(|s| s.covs.display().to_string())
        .collect();
    let report = result.report(&files, size, started.elapsed().as_secs_f64(), None);
    let json = String::from_utf8_lossy(&lacuna::output::json_bytes(&report)).into_owned();
    let written = if rank == 0 {
        let mean = &result.result.mean;
        let mut out = vec![(
            a.out.clone(),
            lacuna::trials::io::encode_matrix(&a.out, mean, &channels),
        )];
        if let Some(r) = &a.report {
            out.push((r.clone(), json.clone().into_bytes()));
        }
        lacuna::output::write_outputs(None, out)
    } else {
        Ok(())
    };
    agree(world, written)?;
    let d = &result.result.diagnostics;
    if rank == 0 {
        if a.json {
            println!("{json}");
        } else if !a.quiet {
            println!(
                "lacuna mean: {} trials from {n} stack files over {size} process(es) ({} per process), {} channels, scheme airm-observed",
                result.n_trials(),
                result
                    .rank_trials
                    .iter()
                    .map(|t| t.to_string())
                    .collect::<Vec<_>>()
                    .join(", "),
                channels.len()
            );
            println!(
                "  {} after {} iterations: gradient norm {:.2e} (tolerance {:.0e}), cost {:.6e}",
                if d.converged {
                    "converged"
                } else {
                    "NOT converged"
                },
                d.iterations,
                d.gradient_norm.unwrap_or(f64::NAN),
                a.job.stop.tol,
                d.cost.unwrap_or(f64::NAN)
            );
            for note in &d.notes {
                println!("  note: {note}");
            }
            println!("  wrote {}", a.out.display());
        }
    }
    Ok(if d.converged { 0 } else { 4 })
}

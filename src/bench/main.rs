//! `lacuna-bench`: measures the Karcher and masked solvers against the floor
//! of their own kernels and (optionally) against a numpy/scipy reference run
//! on the same data in the same session.
//!
//! Run: `cargo run --release --bin lacuna-bench -- --help`. Results and the
//! machine they came from are written down in docs/performance.md.

mod compare;
mod heap;
mod ingest;
mod protocols;
mod stream;
mod throughput;

#[global_allocator]
static HEAP: heap::Counting = heap::Counting;

use std::path::PathBuf;
use std::process::Command;
use std::time::Instant;

use lacuna::schemes::{AirmObserved, Karcher, MaskedKarcherProblem};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::solve::SpdProblem;
use lacuna::spd::kernels::{cholesky, sym_eigen, whiten};
use lacuna::trials::TrialSet;
use lacuna::trials::io::{encode_mask, encode_stack_with_nan};
use lacuna::{AveragingScheme, SchemeOptions};

struct Args {
    mode: String,
    sizes: Vec<(usize, usize)>,
    reference: Option<String>,
    threads: Vec<usize>,
    workers: Vec<usize>,
    file: Option<PathBuf>,
}

fn parse() -> Args {
    let mut a = Args {
        mode: "karcher".into(),
        sizes: vec![],
        reference: None,
        threads: vec![1, 2],
        workers: vec![1, 2],
        file: None,
    };
    let argv: Vec<String> = std::env::args().skip(1).collect();
    let mut i = 0;
    while i < argv.len() {
        match argv[i].as_str() {
            "--mode" => {
                a.mode = argv[i + 1].clone();
                i += 1;
            }
            "--size" => {
                let (n, p) = argv[i + 1].split_once('x').expect("--size NxP");
                a.sizes.push((n.parse().unwrap(), p.parse().unwrap()));
                i += 1;
            }
            "--reference" => {
                a.reference = Some(argv[i + 1].clone());
                i += 1;
            }
            "--threads" => {
                a.threads = argv[i + 1].split(',').map(|t| t.parse().unwrap()).collect();
                i += 1;
            }
            "--workers" => {
                a.workers = argv[i + 1].split(',').map(|t| t.parse().unwrap()).collect();
                i += 1;
            }
            "--file" => {
                a.file = Some(PathBuf::from(&argv[i + 1]));
                i += 1;
            }
            "--help" | "-h" => {
                println!(
                    "lacuna-bench [--mode karcher|masked|kernels|ingest|compare|protocols|influence|rare|hard|throughput|stream] [--size NxP]... [--threads 1,2] [--reference PYTHON] [--workers 1,2] [--file REC.bdf]\n\n\
                     karcher: full-data Karcher mean, default sizes 100x{{8,32,64,128}} and 10000x{{8,32,64,128}}\n\
                     masked:  airm-observed with 20% of trials missing 1-8 channels, default 10000x64\n\
                     compare: the whole compare pipeline on --size NxP (default 2000x32), per stage\n\
                     protocols: compare's protocols with warm against cold starts, derived trial sets against fresh validation; default 1000x64\n\
                     influence: leave-one-channel-out influence on all trials against the default seeded subset; default 10000x32\n\
                     ingest:  a simulated 1-hour, 64-channel, 512 Hz BDF (generated once into --file, default in the temp folder)\n\
                              read, then 2 s epochs with 8-30 Hz band-pass, detection and OAS; throughput and peak memory\n\
                     hard:    short windows (T = p + 8), condition 1e5, gain drift, every trial missing 1-6 channels; default 2000x{{32,64}}\n\
                     rare:    masked sets with channels observed in few trials: plain, joint preconditioned, default (eliminated) solver\n\
                     stream:  the streamed masked mean (mean --stream) against held shards on a stack above 256 MiB, peak memory per run; default 2400x128\n\
                     throughput: re-centring and prediction trials/s (4 sessions, 2 classes, 20% of trials missing 1-8 channels); default 10000x{{32,64}}\n\
                     --reference PYTHON runs tests/reference/bench_reference.py with that interpreter on the same data\n\
                     --workers K,.. runs the reference once per process-pool size (default 1,2: one process, then both cores)\n\
                     (needs numpy/scipy: pip install -r tests/reference/requirements.txt)"
                );
                std::process::exit(0);
            }
            other => panic!("unknown argument {other}"),
        }
        i += 1;
    }
    if a.sizes.is_empty() {
        a.sizes = if a.mode == "masked" {
            vec![(10_000, 64)]
        } else if a.mode == "hard" {
            vec![(2000, 32), (2000, 64)]
        } else if a.mode == "compare" {
            vec![(2000, 32)]
        } else if a.mode.starts_with("stream") {
            vec![(2400, 128)]
        } else if a.mode == "throughput" {
            vec![(10_000, 32), (10_000, 64)]
        } else if a.mode == "rare" {
            vec![(600, 8), (600, 16), (2000, 32)]
        } else {
            [100, 10_000]
                .iter()
                .flat_map(|&n| [8, 32, 64, 128].map(|p| (n, p)))
                .collect()
        };
    }
    a
}

/// Trials: sample covariances (4p samples) of one population of condition 100.
fn make_set(n: usize, p: usize, masked: bool, seed: u64) -> TrialSet {
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, 100.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 4 * p, &mut rng))
        .collect();
    let obs = if masked {
        random_dropout(n, p, 0.2, 8, &mut rng)
    } else {
        vec![(0..p).collect(); n]
    };
    masked_set(&full, obs)
}

/// The floor: one Cholesky whitening and one eigendecomposition per trial,
/// same kernels, same thread pool, mean of 3 repeats.
fn floor_seconds(set: &TrialSet, x: &lacuna::Mat) -> f64 {
    use rayon::prelude::*;
    let groups = set.pattern_groups();
    let run = || {
        let t = Instant::now();
        let factors: Vec<_> = groups
            .par_iter()
            .map(|g| {
                cholesky(&lacuna::Mat::from_fn(
                    g.observed.len(),
                    g.observed.len(),
                    |a, b| x[(g.observed[a], g.observed[b])],
                ))
                .unwrap()
            })
            .collect();
        let mut pairs = Vec::new();
        for (gi, g) in groups.iter().enumerate() {
            for &i in &g.trials {
                pairs.push((gi, i));
            }
        }
        let s: f64 = pairs
            .par_iter()
            .map(|&(gi, i)| sym_eigen(&whiten(&factors[gi], &set.trials()[i].block)).values[0])
            .sum();
        std::hint::black_box(s);
        t.elapsed().as_secs_f64()
    };
    run();
    (run() + run() + run()) / 3.0
}

/// One evaluation of the cost and whitened gradient (what an iteration costs
/// when the unit step is accepted), mean of 3 repeats.
fn evaluation_seconds(set: &TrialSet, x: &lacuna::Mat) -> f64 {
    let problem = MaskedKarcherProblem::new(set);
    let w = sym_eigen(x).apply(f64::sqrt);
    let run = || {
        let t = Instant::now();
        std::hint::black_box(problem.evaluate(&w));
        t.elapsed().as_secs_f64()
    };
    run();
    (run() + run() + run()) / 3.0
}

/// Per-call time of each kernel at several sizes, single thread: the data
/// behind the size switch in `spd::kernels`.
fn kernels() {
    use lacuna::spd::kernels::add_rebuild;
    println!(
        "| p | Cholesky (µs) | whitening (µs) | eigen nalgebra (µs) | eigen faer (µs) | values only nalgebra (µs) | values only faer (µs) | rebuild U·diag·Uᵀ (µs) |"
    );
    println!("|---|---|---|---|---|---|---|---|");
    for p in [8usize, 16, 32, 48, 64, 128, 256] {
        let mut rng = Rng::new(p as u64);
        let a = random_spd(p, 100.0, &mut rng);
        let c = sample_covariance(&a, 4 * p, &mut rng);
        let reps = (2_000_000 / (p * p * p)).clamp(5, 20_000);
        let time = |f: &mut dyn FnMut()| {
            f();
            let t = Instant::now();
            for _ in 0..reps {
                f();
            }
            t.elapsed().as_secs_f64() / reps as f64 * 1e6
        };
        let l = cholesky(&a).unwrap();
        let m = whiten(&l, &c);
        let t_chol = time(&mut || {
            std::hint::black_box(cholesky(&a));
        });
        let t_white = time(&mut || {
            std::hint::black_box(whiten(&l, &c));
        });
        let t_nal = time(&mut || {
            std::hint::black_box(nalgebra::SymmetricEigen::new(m.clone()));
        });
        let fm = faer::Mat::<f64>::from_fn(p, p, |i, j| m[(i, j)]);
        let t_faer = time(&mut || {
            std::hint::black_box(fm.self_adjoint_eigen(faer::Side::Lower).unwrap());
        });
        let t_nal_v = time(&mut || {
            std::hint::black_box(m.clone().symmetric_eigenvalues());
        });
        let t_faer_v = time(&mut || {
            std::hint::black_box(fm.self_adjoint_eigenvalues(faer::Side::Lower).unwrap());
        });
        let e = sym_eigen(&m);
        let mut acc = lacuna::Mat::zeros(p, p);
        let t_re = time(&mut || add_rebuild(&mut acc, &e.vectors, &e.values));
        println!(
            "| {p} | {t_chol:.1} | {t_white:.1} | {t_nal:.1} | {t_faer:.1} | {t_nal_v:.1} | {t_faer_v:.1} | {t_re:.1} |"
        );
    }
}

/// Iterations of the masked mean to 1e-10 on hard sets (T = p + 8 samples,
/// condition 1e5, gain drift, every trial missing 1–6 channels) with no,
/// one (16 trials) and two (16 and 30 trials) rarely observed channels.
/// What the numpy reference reported.
struct ReferenceRun {
    method: String,
    iterations: u64,
    seconds: f64,
    gradient_norm: f64,
    converged: bool,
}

/// Runs tests/reference/bench_reference.py on `set` with a pool of
/// `workers` processes, stopped after `max_seconds` if given.
fn run_reference(
    py: &str,
    set: &TrialSet,
    masked: bool,
    workers: usize,
    max_seconds: Option<f64>,
) -> Option<ReferenceRun> {
    let dir = std::env::temp_dir().join(format!("lacuna-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(dir.join("covs.npy"), encode_stack_with_nan(set)).unwrap();
    std::fs::write(dir.join("mask.npy"), encode_mask(set)).unwrap();
    let script = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/bench_reference.py"
    );
    let mut cmd = Command::new(py);
    cmd.arg(script)
        .arg(&dir)
        .arg(if masked { "masked" } else { "full" })
        .args(["--workers", &workers.to_string()]);
    if let Some(s) = max_seconds {
        cmd.args(["--max-seconds", &format!("{s:.3}")]);
    }
    let out = cmd.output().expect("run the reference");
    let _ = std::fs::remove_dir_all(&dir);
    if !out.status.success() {
        eprintln!("reference failed: {}", String::from_utf8_lossy(&out.stderr));
        return None;
    }
    let text = String::from_utf8_lossy(&out.stdout);
    let v: serde_json::Value = text.lines().find_map(|l| serde_json::from_str(l).ok())?;
    Some(ReferenceRun {
        method: v["method"].as_str().unwrap_or("?").to_string(),
        iterations: v["iterations"].as_u64().unwrap_or(0),
        seconds: v["seconds"].as_f64().unwrap_or(f64::NAN),
        gradient_norm: v["gradient_norm"].as_f64().unwrap_or(f64::NAN),
        converged: v["converged"].as_bool().unwrap_or(false),
    })
}

/// Rare-channel sets: plain L-BFGS, the band-fitted joint solver and the
/// default path (rare rows eliminated), and the numpy reference
/// (2 processes) given 20× the default path's time.
fn rare(args: &Args) {
    use lacuna::simulate::stacks::rare_channel_set;
    println!(
        "| N | p | rare channels | plain: iterations | stop | s | joint preconditioned: iterations | stop | s | default: iterations | stop | s | how | reference after 20× the default time |"
    );
    println!("|---|---|---|---|---|---|---|---|---|---|---|---|---|---|");
    let workers = args.workers.last().copied().unwrap_or(1);
    for &(n, p) in &args.sizes {
        for rare in [vec![], vec![(0, 16)], vec![(0, 16), (1, 30)]] {
            let set = rare_channel_set(n, p, p + 8, 1e5, &rare, 1);
            let mut cells = Vec::new();
            let mut last = f64::NAN;
            let mut how = String::new();
            for (precondition, eliminate_rare) in [(false, false), (true, false), (true, true)] {
                let options = SchemeOptions {
                    precondition,
                    eliminate_rare,
                    ..SchemeOptions::default()
                };
                let t = Instant::now();
                let r = AirmObserved.average(&set, &options).unwrap();
                last = t.elapsed().as_secs_f64();
                cells.push(format!(
                    "{} | {} | {last:.2}",
                    r.diagnostics.iterations,
                    r.diagnostics
                        .stop_reason
                        .map_or("-".into(), |s| format!("{s:?}"))
                ));
                how = r
                    .diagnostics
                    .notes
                    .iter()
                    .find_map(|n| {
                        n.find("fitted exactly").map(|_| {
                            let inner = n
                                .split(" inner iterations")
                                .next()
                                .and_then(|h| h.rsplit('(').next())
                                .unwrap_or("?");
                            format!("eliminated ({inner} inner iterations)")
                        })
                    })
                    .unwrap_or_else(|| {
                        if r.diagnostics.notes.iter().any(|n| n.contains("gave up")) {
                            "elimination gave up, joint".into()
                        } else {
                            "joint".into()
                        }
                    });
            }
            let reference = match &args.reference {
                Some(py) => match run_reference(py, &set, true, workers, Some(20.0 * last)) {
                    Some(r) if r.converged => format!(
                        "converged: {} iterations, {:.2} s ({:.1}× the default time)",
                        r.iterations,
                        r.seconds,
                        r.seconds / last
                    ),
                    Some(r) => format!(
                        "not converged: {} iterations, gradient norm {:.1e} after {:.2} s",
                        r.iterations, r.gradient_norm, r.seconds
                    ),
                    None => "failed".into(),
                },
                None => "-".into(),
            };
            let label: Vec<String> = rare.iter().map(|(c, k)| format!("ch{c} in {k}")).collect();
            println!(
                "| {n} | {p} | {} | {} | {} | {} | {how} | {reference} |",
                if label.is_empty() {
                    "none".into()
                } else {
                    label.join(", ")
                },
                cells[0],
                cells[1],
                cells[2]
            );
        }
    }
}

fn main() {
    let args = parse();
    match args.mode.as_str() {
        "ingest" => {
            ingest::run(args.file.clone(), args.reference.as_deref(), &args.threads);
            return;
        }
        "compare" => {
            let (n, p) = args.sizes.first().copied().unwrap_or((2000, 32));
            compare::run(n, p);
            return;
        }
        "protocols" => {
            let (n, p) = args.sizes.first().copied().unwrap_or((1000, 64));
            protocols::run(n, p);
            return;
        }
        "influence" => {
            let (n, p) = args.sizes.first().copied().unwrap_or((10_000, 32));
            protocols::influence(n, p);
            return;
        }
        "stream" => {
            let (n, p) = args.sizes.first().copied().unwrap_or((2400, 128));
            stream::run(n, p, args.file.clone());
            return;
        }
        "stream-generate" => {
            let (n, p) = args.sizes.first().copied().expect("--size");
            stream::generate(args.file.as_deref().expect("--file"), n, p);
            return;
        }
        "stream-held" | "stream-streamed" => {
            stream::measure(
                args.file.as_deref().expect("--file"),
                args.mode == "stream-streamed",
            );
            return;
        }
        "throughput" => {
            throughput::run(&args.sizes, args.reference.as_deref(), &args.workers);
            return;
        }
        "ingest-generate" => {
            ingest::generate(args.file.as_deref().expect("--file"));
            return;
        }
        "ingest-measure" => {
            ingest::measure(args.file.as_deref().expect("--file"));
            return;
        }
        _ => {}
    }
    if args.mode == "kernels" {
        kernels();
        return;
    }
    if args.mode == "rare" {
        rare(&args);
        return;
    }
    let hard = args.mode == "hard";
    let masked = args.mode == "masked" || hard;
    println!(
        "| N | p | threads | iterations | evaluations | time to tol (s) | per evaluation (ms) | floor (ms) | ratio to floor | gradient norm |"
    );
    println!("|---|---|---|---|---|---|---|---|---|---|");
    for &(n, p) in &args.sizes {
        let set = if hard {
            lacuna::simulate::stacks::rare_channel_set(n, p, p + 8, 1e5, &[], 7)
        } else {
            make_set(n, p, masked, 7)
        };
        let mut per_thread = Vec::new();
        for &threads in &args.threads {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            let (secs, r) = pool.install(|| {
                let t = Instant::now();
                let r = if masked {
                    AirmObserved.average(&set, &SchemeOptions::default())
                } else {
                    Karcher.average(&set, &SchemeOptions::default())
                }
                .unwrap();
                (t.elapsed().as_secs_f64(), r)
            });
            let floor = pool.install(|| floor_seconds(&set, &r.mean));
            let per_eval = pool.install(|| evaluation_seconds(&set, &r.mean));
            let d = &r.diagnostics;
            println!(
                "| {n} | {p} | {threads} | {} | {} | {secs:.3} | {:.2} | {:.2} | {:.2} | {:.1e} |",
                d.iterations,
                d.evaluations,
                per_eval * 1e3,
                floor * 1e3,
                per_eval / floor,
                d.gradient_norm.unwrap_or(f64::NAN)
            );
            per_thread.push(secs);
        }
        if per_thread.len() == 2 {
            println!(
                "|  |  | speedup {}→{} threads: {:.2}× |  |  |  |  |  |  |  |",
                args.threads[0],
                args.threads[1],
                per_thread[0] / per_thread[1]
            );
        }
        if let Some(py) = &args.reference {
            let best = per_thread.last().copied().unwrap_or(f64::NAN);
            for &workers in &args.workers {
                let Some(r) = run_reference(py, &set, masked, workers, None) else {
                    continue;
                };
                println!(
                    "|  |  | reference ({}, {workers} process{}) | {} |  | {:.3} |  |  | lacuna {:.1}× faster | {:.1e} |",
                    r.method,
                    if workers == 1 { "" } else { "es" },
                    r.iterations,
                    r.seconds,
                    r.seconds / best,
                    r.gradient_norm
                );
            }
        }
    }
}

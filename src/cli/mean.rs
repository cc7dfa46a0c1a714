//! `lacuna mean`: one scheme, one trial set, one mean.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::sync::Arc;

use clap::Args;
use lacuna::Result;
use lacuna::jobs::MeanJob;
use lacuna::trials::shards::{self, Shard, ShardExtent};

/// The example and the scheme names shown by `--help`.
fn example() -> String {
    let names: Vec<&str> = lacuna::schemes::SchemeId::ALL
        .iter()
        .map(|id| id.name())
        .collect();
    format!(
        "Example (after `lacuna extract … --out trials`):
  lacuna mean --covs trials/covs.npy --mask trials/mask.csv --out mean.csv --report report.json
  lacuna mean --covs trials/covs.npy --mask trials/mask.csv --scheme gaussian-em --out em.npy

The mean pools every trial given (all labels); weights select or weigh trials.
Schemes (`lacuna schemes` says what each assumes): {}",
        names.join(", ")
    )
}

#[derive(Args, Debug)]
#[command(
    after_help = format!("{}\n\n`--help` (not -h) also defines the figures the report gives.", example()),
    after_long_help = format!("{}\n\n{}", example(), lacuna::report::glossary::help_text(lacuna::report::glossary::MEAN))
)]
pub struct MeanArgs {
    /// Physical unit of the data the covariances came from (e.g. µV); the
    /// report gives covariances in its square. compare takes it from
    /// --epochs when not given.
    #[arg(long, value_name = "UNIT")]
    unit: Option<String>,
    /// Channel names for a stack without a CSV mask (which otherwise get
    /// ch0, ch1, …): comma-separated, or a file of names.
    #[arg(long, value_name = "NAMES|FILE")]
    channels: Option<String>,
    /// Covariance stack: NPY float64 of shape (N, p, p). Rows/columns of
    /// unobserved channels may be NaN (then --mask may be omitted). Several
    /// stacks (shards: a list, or a quoted pattern such as 'shards/*.npy',
    /// expanded in name order) form one trial set, concatenated in order.
    #[arg(long, value_name = "STACK.npy", num_args = 1.., required = true)]
    covs: Vec<PathBuf>,
    /// Observation mask: NPY uint8/bool (N, p) or CSV with a header of channel
    /// names and one 0/1 row per trial (1 = observed). With several stacks,
    /// one mask per stack in the same order (a list or a pattern).
    #[arg(long, value_name = "MASK", num_args = 1..)]
    mask: Vec<PathBuf>,
    /// Averaging scheme; `lacuna schemes` lists them.
    #[arg(long, default_value = "airm-observed", value_name = "NAME")]
    scheme: String,
    /// Where to write the mean: .npy (float64 p×p) or .csv (header of channel names).
    #[arg(long, value_name = "MEAN")]
    out: PathBuf,
    /// Also write a JSON report (convergence, coverage, co-observation, …).
    #[arg(long, value_name = "REPORT.json")]
    report: Option<PathBuf>,
    /// Trial weights: NPY float64 (N,) or a one-column CSV. Default: equal.
    /// With several stacks, one file per stack in the same order.
    #[arg(long, value_name = "FILE", num_args = 1..)]
    weights: Vec<PathBuf>,
    /// Stop when the relative Riemannian gradient norm is at or below this.
    #[arg(long, default_value = "1e-10", value_name = "TOL")]
    tol: f64,
    /// Give up after this many iterations (the mean is still written; exit 4).
    /// Default 500; gaussian-em 5000 (EM takes many cheap steps).
    #[arg(long, value_name = "N")]
    max_iter: Option<usize>,
    /// Starting point of airm-observed: available-case, diagonal or scaled-identity.
    #[arg(long, default_value = "available-case")]
    init: String,
    /// Run airm-observed from this many starting points and report whether
    /// they agree (the masked cost can have several local minima).
    #[arg(long, default_value_t = 1)]
    starts: usize,
    /// Seed for the random extra starts.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// λ for --scheme diagonal-loading: every trial gets λ·(trace/p) added to its diagonal.
    #[arg(long, default_value = "1e-2", value_name = "LAMBDA")]
    loading: f64,
    /// α for --scheme shrinkage: every trial becomes (1−α)·C + α·(trace/p)·I.
    #[arg(long, default_value_t = 0.1)]
    shrinkage: f64,
    /// Samples per trial, when known: --scheme shrinkage then uses each
    /// trial's OAS intensity instead of the fixed --shrinkage.
    #[arg(long, value_name = "T")]
    samples: Option<usize>,
    /// Remove the short-window scale bias of the Riemannian mean (airm-observed,
    /// airm): each observed block is divided by e^c(k, n), c the expected
    /// log-determinant bias of a sample covariance with n degrees of freedom,
    /// so the mean estimates the population covariance rather than a shrunk
    /// copy of it. n is --effective-samples, else --samples minus one
    /// (covariances centred on each window's mean). See docs/masked-mean.md.
    #[arg(long)]
    correct_scale: bool,
    /// Degrees of freedom for --correct-scale when they differ from samples
    /// minus one: zero-mean windows normalised by 1/T have T; autocorrelated
    /// samples have fewer (an estimate you supply, stated as such).
    #[arg(long, value_name = "N")]
    effective_samples: Option<f64>,
    /// Regularise every observed block before averaging, for rank-deficient
    /// windows (average reference, removed components, short windows):
    /// `shrinkage:α` gives (1−α)C + α(tr C/k)I, `loading:λ` gives
    /// C + λ(tr C/k)I, `oas` the OAS intensity for --samples T. Works with
    /// every scheme, airm-observed included; recorded in the report.
    #[arg(long, value_name = "SPEC")]
    regularize: Option<String>,
    /// Rank of --scheme subspace (default: 99% of the available-case trace,
    /// capped at the fewest channels any trial observed).
    #[arg(long)]
    rank: Option<usize>,
    /// Electrode positions for --scheme spherical-spline: `10-20` or `10-10`
    /// (standard positions computed by lacuna, matched to the channel names;
    /// T3/T4/T5/T6 accepted), or a CSV `channel,x,y,z` of your own.
    #[arg(long, value_name = "10-10|FILE.csv")]
    positions: Option<PathBuf>,
    /// Leave out channels that no trial observed instead of refusing.
    #[arg(long)]
    drop_unobserved: bool,
    /// Run airm-observed's solver without the preconditioner for unequally
    /// covered channels and without the elimination of rarely observed
    /// channels' rows (plain L-BFGS; the same mean, usually more iterations).
    #[arg(long)]
    no_precondition: bool,
    /// Trial labels: a CSV with a header, one row per trial, a `label`
    /// column (else the first) and optionally a `session` column — the
    /// labels.csv `lacuna extract` writes. Needed by --by.
    #[arg(long, value_name = "LABELS.csv")]
    labels: Option<PathBuf>,
    /// One mean per group instead of one for all trials: `label` (per
    /// condition), `session`, or `session+label`. --out is then a folder
    /// that receives each group's mean (.npy and .csv), distances.csv
    /// between the group means, and groups.json with every group's report.
    #[arg(long, value_name = "label|session|session+label")]
    by: Option<String>,
    /// With --by session or session+label, the grand mean of the session
    /// means weighs each session by its trial count (`trials`) or alike
    /// (`equal`).
    #[arg(long, default_value = "trials", value_name = "trials|equal")]
    grand: String,
    /// Threshold of --scheme airm-observed-huber, as a multiple of the
    /// median distance of the trials to the masked mean: trials within it
    /// count fully, farther ones with weight threshold/distance.
    #[arg(
        long,
        default_value_t = 1.5,
        value_name = "K",
        allow_negative_numbers = true
    )]
    huber: f64,
    /// Print no summary and no progress (errors and warnings still go to stderr).
    #[arg(long)]
    quiet: bool,
    /// Print the JSON report on stdout as well.
    #[arg(long)]
    json: bool,
    /// Read the stack file(s) again, 32 MiB at a time, at every evaluation
    /// instead of holding them: memory stays near 256 MiB whatever the
    /// number of trials (the plain masked mean only; docs/scale.md).
    #[arg(long)]
    stream: bool,
}

/// The stack files (patterns expanded) paired with their masks and weights.
fn shards_of(a: &MeanArgs) -> Result<Vec<Shard>> {
    shards::pair(
        shards::expand_all(&a.covs, "--covs")?,
        shards::expand_all(&a.mask, "--mask")?,
        shards::expand_all(&a.weights, "--weights")?,
    )
}

/// Every input file with its flag (outputs must differ from all of them).
fn input_files(a: &MeanArgs, shards: &[Shard]) -> Vec<(&'static str, PathBuf)> {
    let positions = super::positions_file(&a.positions).map(PathBuf::from);
    let mut inputs = Vec::new();
    for s in shards {
        inputs.push(("--covs", s.covs.clone()));
        for (flag, path) in [("--mask", &s.mask), ("--weights", &s.weights)] {
            if let Some(p) = path {
                inputs.push((flag, p.clone()));
            }
        }
    }
    for (flag, path) in [("--labels", &a.labels), ("--positions", &positions)] {
        if let Some(p) = path {
            inputs.push((flag, p.clone()));
        }
    }
    inputs
}

/// Reads the shards as one trial set (after a memory check on their total
/// size) and applies --channels.
fn load(a: &MeanArgs, shards: &[Shard]) -> Result<(lacuna::TrialSet, Vec<ShardExtent>)> {
    // The stack is read block by block, then worked on: peak resident memory
    // measured at 1.5× the file (20 000 trials × 32 channels: 238 MB for a
    // 156 MB stack); 2× leaves a margin.
    let bytes: u64 = shards
        .iter()
        .filter_map(|s| std::fs::metadata(&s.covs).ok())
        .map(|m| m.len())
        .sum();
    lacuna::limits::check_fits("lacuna mean", 2 * bytes, rayon::current_num_threads())?;
    let (set, extents) = shards::load(shards)?;
    let first_mask = shards.first().and_then(|s| s.mask.as_deref());
    let set = super::apply_channel_names(set, a.channels.as_deref(), first_mask)?;
    Ok((set, extents))
}

/// The mean job the flags describe (positions are loaded after the data).
fn job_of(a: &MeanArgs) -> MeanJob {
    MeanJob {
        scheme: a.scheme.clone(),
        tol: a.tol,
        max_iter: a.max_iter,
        init: a.init.clone(),
        starts: a.starts,
        seed: a.seed,
        loading: a.loading,
        shrinkage: a.shrinkage,
        samples: a.samples,
        rank: a.rank,
        positions: None,
        correct_scale: a.correct_scale,
        effective_samples: a.effective_samples,
        regularize: a.regularize.clone(),
        drop_unobserved: a.drop_unobserved,
        no_precondition: a.no_precondition,
        huber: a.huber,
        unit: a.unit.clone(),
    }
}

pub fn run(a: MeanArgs) -> Result<i32> {
    if a.by.is_some() {
        return run_grouped(a);
    }
    if a.labels.is_some() {
        return Err(lacuna::LacunaError::InvalidOption(
            "--labels is used with --by (one mean per label or session); without --by the mean pools every trial".into(),
        ));
    }
    // The format follows the extension: refuse one we would not honour.
    let ext = a
        .out
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    if !matches!(ext.as_deref(), Some("npy" | "csv")) {
        return Err(lacuna::LacunaError::InvalidOption(format!(
            "--out {}: write the mean as .npy (float64 p×p) or .csv (a header of channel names); the extension chooses the format",
            a.out.display()
        )));
    }
    let under_mpi =
        super::distributed::launched_processes().is_some_and(|k| k > 1 || cfg!(feature = "mpi"));
    if under_mpi || a.stream {
        return run_distributed(a);
    }
    let mut job = job_of(&a);
    // Settings are checked before any file is read.
    job.options(None)?;
    let shards = shards_of(&a)?;
    {
        let inputs = input_files(&a, &shards);
        let inputs: Vec<(&str, &std::path::Path)> =
            inputs.iter().map(|(o, p)| (*o, p.as_path())).collect();
        let mut outputs: Vec<(&str, &std::path::Path)> = vec![("--out", &a.out)];
        if let Some(r) = &a.report {
            outputs.push(("--report", r));
        }
        lacuna::output::check_paths(&inputs, &outputs, &[])?;
    }
    let (set, extents) = load(&a, &shards)?;
    if let Some(spec) = &a.positions {
        job.positions = Some(super::load_positions(spec, set.channels())?);
    }
    let show_progress = !a.quiet && std::io::stderr().is_terminal();
    let observer: Option<lacuna::schemes::Observer> = if show_progress {
        Some(Arc::new(|r: &lacuna::solve::IterRecord| {
            eprint!(
                "\r  iteration {:>4}  cost {:.6e}  gradient {:.3e}   ",
                r.iteration, r.cost, r.gradient_norm
            );
        }))
    } else {
        None
    };
    let run = job.run(set, observer)?;
    if show_progress {
        eprintln!();
    }
    let (set, result, summary) = (&run.set, &run.result, &run.summary);
    let mean_bytes = lacuna::trials::io::encode_matrix(&a.out, &result.published(), set.channels());
    let inputs = input_files(&a, &shards);
    let input_paths: Vec<&std::path::Path> = inputs.iter().map(|(_, p)| p.as_path()).collect();
    let mut report = run.report(Some(lacuna::report::provenance::provenance(&input_paths)?));
    if extents.len() > 1 {
        report.shards = Some(extents.clone());
    }
    let json = report.to_json();
    // The mean and its report are staged together and renamed together: a
    // failing report never leaves a new mean beside an old report.
    let mut files = vec![(a.out.clone(), mean_bytes)];
    if let Some(path) = &a.report {
        files.push((path.clone(), json.as_bytes().to_vec()));
    }
    lacuna::output::write_outputs(None, files)?;
    if a.json {
        println!("{json}");
    }
    let d = &result.diagnostics;
    if !a.quiet && !a.json {
        let incomplete = (0..set.len()).filter(|&i| !set.is_complete(i)).count();
        println!(
            "lacuna mean: {} trials ({incomplete} incomplete){}, {} channels, scheme {}",
            set.len(),
            if extents.len() > 1 {
                format!(" from {} stack files", extents.len())
            } else {
                String::new()
            },
            set.n_channels(),
            result.scheme
        );
        if let Some(line) = run.ranks.summary_line() {
            println!(
                "  {line}{}",
                match run.regularizer {
                    Some(r) => format!("; regularised first by {}", r.label()),
                    None => String::new(),
                }
            );
        }
        if !run.dropped.is_empty() {
            println!(
                "  dropped channels observed in no trial: {}",
                run.dropped.join(", ")
            );
        }
        if d.iterative {
            println!(
                "  {} after {} iterations: gradient norm {:.2e} (tolerance {:.0e}), cost {:.6e}",
                match d.stop_reason {
                    _ if d.converged => "converged",
                    Some(lacuna::solve::StopReason::Boundary) =>
                        "ran to the boundary of the SPD cone (NO positive definite mean exists)",
                    _ => "NOT converged",
                },
                d.iterations,
                d.gradient_norm.unwrap_or(f64::NAN),
                a.tol,
                d.cost.unwrap_or(f64::NAN)
            );
        }
        for n in &d.notes {
            println!("  note: {n}");
        }
        println!(
            "  condition number {:.3e}, log det {:.4}; wrote {}",
            summary.condition_number,
            summary.log_det_mean,
            a.out.display()
        );
    }
    if !run.converged() {
        for line in &report.advice {
            eprintln!("warning: {line}");
        }
        return Ok(4);
    }
    Ok(0)
}

/// Under `mpirun` or with --stream: the masked mean over shards (spread
/// across processes under mpirun; cli/distributed.rs). Options that change what is computed beyond the
/// plain masked mean are refused rather than ignored.
fn run_distributed(a: MeanArgs) -> Result<i32> {
    let refuse = |flag: &str| {
        Err(lacuna::LacunaError::InvalidOption(format!(
            "{flag} is not available in distributed runs (mpirun) or with --stream; they compute the plain masked mean (airm-observed) — run without them for it"
        )))
    };
    if a.scheme != "airm-observed" {
        return refuse("--scheme other than airm-observed");
    }
    for (set, flag) in [
        (a.by.is_some(), "--by"),
        (a.labels.is_some(), "--labels"),
        (a.starts > 1, "--starts"),
        (a.regularize.is_some(), "--regularize"),
        (a.correct_scale, "--correct-scale"),
        (a.effective_samples.is_some(), "--effective-samples"),
        (a.positions.is_some(), "--positions"),
        (a.drop_unobserved, "--drop-unobserved"),
    ] {
        if set {
            return refuse(flag);
        }
    }
    let options = job_of(&a).options(None)?;
    let shards = shards_of(&a)?;
    let args = super::distributed::DistributedArgs {
        shards,
        channels: a.channels.clone(),
        out: a.out.clone(),
        report: a.report.clone(),
        json: a.json,
        quiet: a.quiet,
        stream: a.stream,
        job: lacuna::distributed::sharded::ShardedMeanJob::new(options.stop, options.init),
    };
    if super::distributed::launched_processes().is_some() {
        super::distributed::run(args)
    } else {
        // --stream in one process.
        super::distributed::run_on(&lacuna::distributed::Local, args)
    }
}

/// `--by`: one mean per group, written into the --out folder.
fn run_grouped(a: MeanArgs) -> Result<i32> {
    use lacuna::LacunaError;
    use lacuna::jobs::{GrandWeighting, GroupBy, GroupedMeanJob};
    let by = GroupBy::from_name(a.by.as_deref().unwrap_or_default())?;
    let grand = GrandWeighting::from_name(&a.grand)?;
    if a.report.is_some() {
        return Err(LacunaError::InvalidOption(
            "--report: with --by every group's report goes into the --out folder (groups.json)"
                .into(),
        ));
    }
    if let Some(ext) = a.out.extension().and_then(|e| e.to_str())
        && matches!(ext.to_ascii_lowercase().as_str(), "npy" | "csv")
    {
        return Err(LacunaError::InvalidOption(format!(
            "--out {}: with --by, --out names a folder (it receives one mean per group)",
            a.out.display()
        )));
    }
    let Some(labels) = a.labels.clone() else {
        return Err(LacunaError::MissingSetting {
            setting: "labels".into(),
            needed_for: format!("--by {}", by.name()),
        });
    };
    let mut job = GroupedMeanJob {
        mean: job_of(&a),
        by,
        grand,
    };
    job.mean.options(None)?;
    let shards = shards_of(&a)?;
    let inputs = input_files(&a, &shards);
    let input_refs: Vec<(&str, &std::path::Path)> =
        inputs.iter().map(|(o, p)| (*o, p.as_path())).collect();
    lacuna::output::check_paths(&input_refs, &[], &[("--out", &a.out)])?;
    let (mut set, _) = load(&a, &shards)?;
    let (l, s) = lacuna::trials::io::read_labels(&labels, set.len())?;
    set.labels = Some(l);
    set.sessions = s;
    if let Some(spec) = &a.positions {
        job.mean.positions = Some(super::load_positions(spec, set.channels())?);
    }
    let show_progress = !a.quiet && std::io::stderr().is_terminal();
    let progress = move |name: &str, done: usize, total: usize| {
        if show_progress {
            eprint!("\r  group {}/{total}: {name}   ", done + 1);
        }
    };
    let means = job.run(&set, Some(&progress))?;
    if show_progress {
        eprintln!();
    }
    let input_paths: Vec<&std::path::Path> = inputs.iter().map(|(_, p)| p.as_path()).collect();
    let report = means.report(Some(lacuna::report::provenance::provenance(&input_paths)?));
    let json = serde_json::to_string_pretty(&report).unwrap_or_default();
    let mut files: Vec<(PathBuf, Vec<u8>)> = Vec::new();
    let channels = &means.channels;
    for (g, entry) in means.groups.iter().zip(&report.groups) {
        for f in &entry.files {
            let path = a.out.join(f);
            let bytes = lacuna::trials::io::encode_matrix(&path, &g.mean, channels);
            files.push((path, bytes));
        }
    }
    for (g, entry) in means.grand.iter().zip(&report.grand) {
        let m = g.mean.as_ref().expect("computed by run");
        for f in &entry.files {
            let path = a.out.join(f);
            let bytes = lacuna::trials::io::encode_matrix(&path, m, channels);
            files.push((path, bytes));
        }
    }
    let names: Vec<String> = means.groups.iter().map(|g| g.name.clone()).collect();
    let mut header = vec!["group".to_string()];
    header.extend(names.iter().cloned());
    let rows = means.distances.iter().zip(&names).map(|(row, name)| {
        let mut r = vec![name.clone()];
        r.extend(
            row.iter()
                .map(|d| d.map_or(String::new(), |v| format!("{v:.6}"))),
        );
        r
    });
    files.push((
        a.out.join("distances.csv"),
        lacuna::report::tables::table(&header, rows),
    ));
    files.push((a.out.join("groups.json"), json.as_bytes().to_vec()));
    lacuna::output::write_outputs(Some(&a.out), files)?;
    if a.json {
        println!("{json}");
    }
    if !a.quiet && !a.json {
        println!(
            "lacuna mean: {} trials, {} channels, scheme {}, one mean per {} ({} groups)",
            set.len(),
            set.n_channels(),
            a.scheme,
            by.name(),
            means.groups.len()
        );
        for (g, entry) in means.groups.iter().zip(&report.groups) {
            let d = &g.run.result.diagnostics;
            println!(
                "  {:<24} {:>6} trials  {}  condition number {:.3e}{}  -> {}",
                g.name,
                g.trials.len(),
                if !d.iterative {
                    "closed form".to_string()
                } else if d.converged {
                    format!("converged in {} iterations", d.iterations)
                } else {
                    format!("NOT converged ({} iterations)", d.iterations)
                },
                g.run.summary.condition_number,
                if g.run.dropped.is_empty() {
                    String::new()
                } else {
                    format!(
                        "  (left out, never observed here: {})",
                        g.run.dropped.join(", ")
                    )
                },
                entry.files[0]
            );
        }
        let pairs: Vec<(&String, &String, f64)> = names
            .iter()
            .enumerate()
            .flat_map(|(i, x)| {
                let row = &means.distances[i];
                names
                    .iter()
                    .enumerate()
                    .skip(i + 1)
                    .filter_map(move |(j, y)| row[j].map(|d| (x, y, d)))
            })
            .collect();
        if pairs.len() <= 10 {
            if !pairs.is_empty() {
                println!("  affine-invariant distances between the group means (distances.csv):");
            }
            for (x, y, d) in &pairs {
                println!("    {x} – {y}: {d:.4}");
            }
        } else {
            let lo = pairs.iter().map(|t| t.2).fold(f64::INFINITY, f64::min);
            let hi = pairs.iter().map(|t| t.2).fold(0.0, f64::max);
            println!(
                "  {} distances between the group means, {lo:.4} to {hi:.4} (distances.csv)",
                pairs.len()
            );
        }
        for (g, entry) in means.grand.iter().zip(&report.grand) {
            println!(
                "  grand mean of {} over {} session means (weighted by {}){} -> {}",
                g.name,
                g.sessions.len(),
                g.weighting.name(),
                if g.converged { "" } else { ", NOT converged" },
                entry.files[0]
            );
        }
        println!("  wrote {}", a.out.display());
    }
    if !means.converged() {
        for entry in &report.groups {
            for line in &entry.report.advice {
                eprintln!("warning: group '{}': {line}", entry.name);
            }
        }
        for g in means.grand.iter().filter(|g| !g.converged) {
            eprintln!("warning: the grand mean of {} did not converge", g.name);
        }
        return Ok(4);
    }
    Ok(0)
}

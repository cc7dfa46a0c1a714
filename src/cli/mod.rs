//! Command-line definitions and one runner per subcommand.
//!
//! The binary is thin: each runner parses paths and options into library
//! calls and maps [`lacuna::LacunaError`] to a message and an exit code
//! (0 ok, 1 output failure, 2 usage, 3 invalid input, 4 numerical failure).

mod compare;
mod decode;
mod distributed;
mod errors;
mod extract;
mod mean;
mod merge;
mod progress;
mod recentre;
mod report;
mod synth;

use clap::{Parser, Subcommand};

/// Riemannian means of channel covariance matrices when trials lose channels.
///
/// lacuna reads recordings (EDF/BDF, CSV, NPY epochs) and finds which
/// channels each epoch lost, or reads per-trial covariance matrices (NPY
/// stack) with a mask of which channels each trial observed, and averages
/// them on the manifold of SPD matrices. The flagship scheme, airm-observed, fits one full-size mean to
/// each trial's observed sub-block only: no filling, no diagonal loading.
///
/// Research software, not a medical device: results inform analysis; they do
/// not diagnose. Follow local rules and licensed clinical practice.
#[derive(Parser, Debug)]
#[command(
    name = "lacuna",
    version,
    about,
    long_about,
    after_help = "Start with the demo:\n  lacuna extract demo-data/recording/session-*.edf --offset 0.5 --length 2 --band 8-30 --out trials\n  lacuna mean --covs trials/covs.npy --mask trials/mask.csv --out mean.csv --report report.json\n\nExit codes: 0 ok; 1 could not write output; 2 usage error; 3 invalid input (nothing written); 4 numerical failure (mean written, report says why)."
)]
pub struct Cli {
    #[command(subcommand)]
    command: Command,
    /// Worker threads (default: all cores; at most 8 per core). Results do
    /// not depend on it.
    #[arg(long, global = true, value_name = "N")]
    threads: Option<usize>,
}

/// Most worker threads per core: beyond this, threads only cost memory.
const THREADS_PER_CORE: usize = 8;

/// Starts the global worker pool: `--threads` (capped at 8 per core, said
/// on stderr), else one per core. A pool that cannot start (process limits)
/// is an error with advice, never a panic later.
fn start_pool(threads: Option<usize>) -> Result<(), String> {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let cap = THREADS_PER_CORE * cores;
    let n = match threads {
        Some(0) => return Err("--threads must be at least 1".into()),
        Some(n) if n > cap => {
            eprintln!("note: --threads {n} capped at {cap} (8 per core on this machine's {cores})");
            cap
        }
        Some(n) => n,
        None => cores,
    };
    rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build_global()
        .map_err(|e| {
            format!("cannot start {n} worker thread(s): {e}; raise the process limit (ulimit -u) or pass --threads 1")
        })
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Cut recordings (EDF/BDF/CSV) or ready epochs (NPY) into a masked covariance stack.
    Extract(extract::ExtractArgs),
    /// Average a covariance stack with one scheme and write the mean.
    Mean(mean::MeanArgs),
    /// Run every scheme on the same trials, rank them with evidence, and
    /// report each channel's contribution.
    Compare(compare::CompareArgs),
    /// Train a masked minimum-distance-to-mean decoder (one mean per class),
    /// with cross-validation.
    Train(decode::TrainArgs),
    /// Classify trials with a model written by `train`.
    Classify(decode::ClassifyArgs),
    /// Pool trial-set folders recorded with different electrode lists
    /// (channels matched by name, the union kept).
    Merge(merge::MergeArgs),
    /// Whiten every trial by its session's mean (masks kept), so sessions
    /// can be pooled.
    Recentre(recentre::RecentreArgs),
    /// Write the self-contained HTML report of a compare folder.
    Report(report::ReportArgs),
    /// List the averaging schemes and what each assumes.
    Schemes,
    /// Generate simulated data with known truth: covariance stacks or raw recordings.
    Synth(synth::SynthArgs),
}

/// `--positions 10-20` or `10-10` (when no file of that name exists): the
/// standard system, computed by lacuna; otherwise a CSV file.
fn standard_system(spec: &std::path::Path) -> Option<lacuna::electrodes::System> {
    lacuna::electrodes::System::from_name(spec.to_str()?).filter(|_| !spec.exists())
}

/// The `--positions` file, when it names one (an input to check and record).
pub fn positions_file(spec: &Option<std::path::PathBuf>) -> Option<&std::path::Path> {
    spec.as_deref().filter(|p| standard_system(p).is_none())
}

/// Electrode positions for `channels`, keyed by name: a standard system's,
/// or read from the CSV file.
pub fn load_positions(
    spec: &std::path::Path,
    channels: &[String],
) -> lacuna::Result<std::collections::BTreeMap<String, [f64; 3]>> {
    let positions = match standard_system(spec) {
        Some(system) => lacuna::electrodes::standard_positions(channels, system)?,
        None => lacuna::trials::io::read_positions(spec, channels)?,
    };
    Ok(channels.iter().cloned().zip(positions).collect())
}

/// Runs the command line; returns the process exit code.
pub fn run() -> i32 {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() { 2 } else { 0 };
        }
    };
    if let Err(msg) = start_pool(cli.threads) {
        eprintln!("error: {msg}");
        return if msg.starts_with("--threads") { 2 } else { 1 };
    }
    let outcome = match cli.command {
        Command::Extract(args) => extract::run(args),
        Command::Mean(args) => mean::run(args),
        Command::Compare(args) => compare::run(args),
        Command::Recentre(args) => recentre::run(args),
        Command::Merge(args) => merge::run(args),
        Command::Train(args) => decode::train(args),
        Command::Classify(args) => decode::classify(args),
        Command::Report(args) => report::run(args),
        Command::Schemes => {
            for s in lacuna::all_schemes() {
                let missing = if s.handles_missing() {
                    "accepts missing channels"
                } else {
                    "complete trials only"
                };
                println!("{:<17} {} ({missing})", s.name(), s.summary());
            }
            Ok(0)
        }
        Command::Synth(args) => synth::run(args),
    };
    match outcome {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {}", errors::describe(&e));
            errors::exit_code(&e)
        }
    }
}

/// Channel names from `--channels`: a comma-separated list, or a file holding
/// the names (one per line or comma-separated). A CSV mask's header, when
/// there is one, must agree with them.
/// The names `--channels` gives (comma-separated, or a file of names), with
/// where they came from; checked against a CSV mask's header when there is one.
pub fn channel_names(
    spec: &str,
    mask: Option<&std::path::Path>,
    header: &[String],
) -> lacuna::Result<(Vec<String>, String)> {
    let path = std::path::Path::new(spec);
    let (text, source) = if path.is_file() {
        lacuna::trials::io::require_regular(path)?;
        (
            std::fs::read_to_string(path).map_err(|source| lacuna::LacunaError::Read {
                path: path.to_path_buf(),
                source,
            })?,
            spec.to_string(),
        )
    } else {
        (spec.to_string(), "--channels".to_string())
    };
    let names: Vec<String> = text
        .split([',', '\n'])
        .map(|n| n.trim().to_string())
        .filter(|n| !n.is_empty())
        .collect();
    let from_mask = mask.is_some_and(|m| {
        m.extension()
            .and_then(|e| e.to_str())
            .is_some_and(|e| e.eq_ignore_ascii_case("csv"))
    });
    if from_mask && names != header {
        return Err(lacuna::LacunaError::InvalidOption(format!(
            "--channels ({}) disagrees with the mask's header ({}); give one or make them agree",
            names.join(", "),
            header.join(", ")
        )));
    }
    Ok((names, source))
}

pub fn apply_channel_names(
    set: lacuna::TrialSet,
    spec: Option<&str>,
    mask: Option<&std::path::Path>,
) -> lacuna::Result<lacuna::TrialSet> {
    let Some(spec) = spec else {
        return Ok(set);
    };
    let (names, source) = channel_names(spec, mask, set.channels())?;
    set.with_channel_names(names, &source)
}

//! `lacuna extract`: recordings → epochs → mask with reasons → covariance stack.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};

use clap::Args;
use lacuna::Result;
use lacuna::jobs::extract::ExtractRun;
use lacuna::jobs::{ExtractJob, ExtractionRecord};
use lacuna::trials::io::{encode_mask, encode_mask_csv, encode_stack_with_nan};

#[derive(Args, Debug)]
#[command(after_help = "Examples:
  # EDF+/BDF+ recordings whose annotations mark the trials (one file per session):
  lacuna extract demo-data/recording/session-*.edf --offset 0.5 --length 2 --band 8-30 --out trials
  # A CSV recording cut at the events of an events CSV (columns onset, duration, label):
  lacuna extract run.csv --rate 250 --events run-events.csv --offset 0.5 --length 2 --out trials
  # The same recording in fixed 2 s windows every 1 s instead of events:
  lacuna extract run.csv --rate 250 --window 2 --step 1 --out trials
  # Ready epochs (N × p × T):
  lacuna extract --epochs epochs.npy --rate 250 --band 8-30 --out trials

Then: lacuna mean --covs trials/covs.npy --mask trials/mask.csv --out mean.csv")]
pub struct ExtractArgs {
    /// Recordings, one per session: EDF/EDF+ or BDF/BDF+ (sniffed from the
    /// header), or CSV (samples × channels with a header row; needs --rate).
    #[arg(value_name = "RECORDING")]
    recordings: Vec<PathBuf>,
    /// Ready epochs instead of recordings: NPY float32/float64 (N, p, T); needs --rate.
    #[arg(long, value_name = "EPOCHS.npy", conflicts_with = "recordings")]
    epochs: Option<PathBuf>,
    /// Events CSV (onset, duration, label; seconds), one per recording, in
    /// the same order. Default: the EDF+/BDF+ annotations.
    #[arg(long, value_name = "EVENTS.csv")]
    events: Vec<PathBuf>,
    /// Sampling rate in Hz for CSV recordings and NPY epochs.
    #[arg(long, value_name = "HZ")]
    rate: Option<f64>,
    /// Epoch start relative to each event's onset, seconds (±86400).
    #[arg(
        long,
        default_value_t = 0.0,
        allow_hyphen_values = true,
        value_name = "SECONDS"
    )]
    offset: f64,
    /// Epoch length in seconds (with events; up to 86400). Default: each
    /// event's duration when all events share one, else required.
    #[arg(long, value_name = "SECONDS")]
    length: Option<f64>,
    /// Fixed windows of this many seconds instead of events.
    #[arg(long, value_name = "SECONDS", conflicts_with_all = ["events", "length"])]
    window: Option<f64>,
    /// Step between fixed windows (default: the window; shorter steps overlap).
    #[arg(long, value_name = "SECONDS", requires = "window")]
    step: Option<f64>,
    /// Keep only events with these labels (comma-separated).
    #[arg(long, value_delimiter = ',', value_name = "LABELS")]
    labels: Vec<String>,
    /// Band-pass in Hz, LOW-HIGH (zero-phase Butterworth). Default: no band filter.
    #[arg(long, value_name = "LOW-HIGH")]
    band: Option<String>,
    /// Butterworth prototype order of the band-pass (the band-pass has twice the poles); 1–10.
    #[arg(long, default_value_t = 4)]
    order: usize,
    /// Covariance estimator per epoch: oas, ledoit-wolf or sample.
    #[arg(long, default_value = "oas")]
    estimator: String,
    /// Use only these channels, in this order (comma-separated names).
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    channels: Vec<String>,
    /// Channels to mask in every epoch (comma-separated names).
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    bad: Vec<String>,
    /// A mask (CSV with channel names, or NPY; epochs × channels, 1 = observed)
    /// that replaces automatic detection.
    #[arg(long, value_name = "MASK")]
    mask: Option<PathBuf>,
    /// Physical unit of the samples (e.g. µV); default: the EDF/BDF header's
    /// when every channel shares one. Recorded in epochs.json.
    #[arg(long, value_name = "UNIT")]
    unit: Option<String>,
    /// Do not read the annotation signal of EDF+/BDF+ files (it is otherwise
    /// checked in full, and a malformed one is refused); give the events
    /// with --events or use --window.
    #[arg(long)]
    skip_annotations: bool,
    /// Turn automatic detection off: only missing samples and --bad count.
    #[arg(long)]
    no_detect: bool,
    /// amplitude-outlier: mask a channel whose robust SD has a robust z-score (among the epoch's channels) beyond ± this (0.5–100).
    #[arg(long, default_value_t = 6.0)]
    amplitude_z: f64,
    /// broadband-excess: mask a channel whose log amplitude above 45 Hz has a robust z-score (among the epoch's channels) above this (0.5–100).
    #[arg(long, default_value_t = 7.0)]
    broadband_z: f64,
    /// Mask a channel whose largest |correlation| with the others is below this (0–1).
    #[arg(long, default_value_t = 0.5)]
    min_correlation: f64,
    /// Mask a channel whose robust SD falls below this fraction of its session median (0–1).
    #[arg(long, default_value_t = 0.1)]
    flat_ratio: f64,
    /// Mask a channel with at least this fraction of samples at the digital limits (1e-6–1).
    #[arg(long, default_value_t = 0.05)]
    rail_fraction: f64,
    /// Output folder: covs.npy (NaN where unobserved), mask.npy, mask.csv,
    /// labels.csv (label, session per trial) and epochs.json (everything else).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Also write every masked (epoch, channel) with its reason and measurements.
    #[arg(long, value_name = "FILE.csv")]
    mask_report: Option<PathBuf>,
    /// Print the summary as JSON on stdout.
    #[arg(long)]
    json: bool,
    /// No progress bar.
    #[arg(long)]
    quiet: bool,
}

pub fn run(a: ExtractArgs) -> Result<i32> {
    {
        let mut inputs: Vec<(&str, &Path)> = a
            .recordings
            .iter()
            .map(|r| ("a recording", r.as_path()))
            .chain(a.events.iter().map(|e| ("--events", e.as_path())))
            .collect();
        for (o, p) in [("--epochs", &a.epochs), ("--mask", &a.mask)] {
            if let Some(p) = p {
                inputs.push((o, p));
            }
        }
        let outputs: Vec<(&str, &Path)> = a
            .mask_report
            .iter()
            .filter(|m| !m.starts_with(&a.out))
            .map(|m| ("--mask-report", m.as_path()))
            .collect();
        lacuna::output::check_paths(&inputs, &outputs, &[("--out", &a.out)])?;
    }
    let job = ExtractJob {
        recordings: a.recordings.clone(),
        epochs: a.epochs.clone(),
        events: a.events.clone(),
        rate: a.rate,
        offset: a.offset,
        length: a.length,
        window: a.window,
        step: a.step,
        labels: a.labels.clone(),
        band: a.band.clone(),
        order: a.order,
        estimator: a.estimator.clone(),
        no_detect: a.no_detect,
        amplitude_z: a.amplitude_z,
        broadband_z: a.broadband_z,
        min_correlation: a.min_correlation,
        flat_ratio: a.flat_ratio,
        rail_fraction: a.rail_fraction,
        channels: a.channels.clone(),
        bad: a.bad.clone(),
        mask: a.mask.clone(),
        skip_annotations: a.skip_annotations,
        unit: a.unit.clone(),
    };
    // Every setting checked before any file is read; messages name the flags.
    job.validate()?;
    let show = !a.quiet && std::io::stderr().is_terminal();
    let progress = |done: u64, total: u64| {
        if show {
            let frac = done as f64 / total.max(1) as f64;
            let filled = (frac * 30.0).round() as usize;
            eprint!(
                "\rextracting [{}{}] {:>3.0}%  {:.1} M samples",
                "#".repeat(filled),
                " ".repeat(30 - filled.min(30)),
                frac * 100.0,
                done as f64 / 1e6
            );
        }
    };
    let run = job.run(&progress)?;
    if show {
        eprintln!();
    }
    if !a.quiet {
        for w in &run.warnings {
            eprintln!("warning: {w}");
        }
        for n in &run.notes {
            eprintln!("note: {n}");
        }
    }
    let provenance = {
        let mut paths: Vec<&Path> = a.recordings.iter().map(PathBuf::as_path).collect();
        paths.extend(a.events.iter().map(PathBuf::as_path));
        for p in [&a.epochs, &a.mask].into_iter().flatten() {
            paths.push(p);
        }
        lacuna::report::provenance::provenance(&paths)?
    };
    let record = run.record(
        Some(provenance),
        a.mask.as_ref().map(|m| m.display().to_string()),
    );
    // Everything is encoded before the first file is written.
    let mut files = vec![
        (a.out.join("covs.npy"), encode_stack_with_nan(&run.set)),
        (a.out.join("mask.npy"), encode_mask(&run.set)),
        (a.out.join("mask.csv"), encode_mask_csv(&run.set)),
        (a.out.join("labels.csv"), run.labels_table()),
        (
            a.out.join("epochs.json"),
            lacuna::output::json_bytes(&record),
        ),
    ];
    if let Some(path) = &a.mask_report {
        files.push((path.clone(), run.mask_report_table()));
    }
    lacuna::output::write_outputs(Some(&a.out), files)?;
    if a.json {
        println!(
            "{}",
            String::from_utf8_lossy(&lacuna::output::json_bytes(&record.summary))
        );
    } else if !a.quiet {
        print_summary(&a, &run, &record);
    }
    Ok(0)
}

fn print_summary(a: &ExtractArgs, run: &ExtractRun, record: &ExtractionRecord) {
    let s = &record.summary;
    let cells = s.epochs * s.channels;
    println!(
        "{} epochs × {} channels → {} trials; {} of {} cells masked ({:.1}%)",
        s.epochs,
        s.channels,
        s.trials,
        s.masked_cells,
        cells,
        100.0 * s.masked_fraction
    );
    for (reason, n) in &s.reasons {
        println!("  {reason:<22} {n}");
    }
    if !s.empty_epochs.is_empty() {
        println!(
            "  {} epoch(s) lost every channel and are not trials: {:?}",
            s.empty_epochs.len(),
            s.empty_epochs
        );
    }
    for note in &run.extraction.notes {
        println!("note: {note}");
    }
    println!(
        "wrote {}/covs.npy, mask.npy, mask.csv, labels.csv, epochs.json",
        a.out.display()
    );
    println!(
        "next: lacuna mean --covs {0}/covs.npy --mask {0}/mask.csv --out mean.csv",
        a.out.display()
    );
}

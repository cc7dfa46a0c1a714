//! `lacuna extract`: recordings → epochs → mask with reasons → covariance stack.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};

use clap::Args;
use lacuna::Result;
use lacuna::ingest::detect::Reason;
use lacuna::ingest::pipeline::{ExtractOptions, Extraction};
use lacuna::jobs::ExtractJob;
use lacuna::trials::io::{encode_mask, encode_mask_csv, encode_stack_with_nan};
use serde_json::json;

#[derive(Args, Debug)]
#[command(after_help = "Examples:
  # EDF+/BDF+ recordings whose annotations mark the trials (one file per session):
  lacuna extract demo-data/recording/session-*.edf --offset 0.5 --length 2 --band 8-30 --out trials
  # A CSV recording with an events CSV, fixed 2 s windows instead of events:
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
    #[arg(long, default_value_t = 0.0, allow_hyphen_values = true)]
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
    job.validate().map_err(super::ranges::as_flag)?;
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
    let (out, set, elapsed) = (&run.extraction, &run.set, run.elapsed_seconds);
    write_outputs(
        &a,
        out,
        set,
        &run.sources,
        &run.options,
        elapsed,
        run.unit.as_deref(),
    )?;
    let summary = summary_json(out, set, elapsed);
    if a.json {
        println!("{}", serde_json::to_string_pretty(&summary).expect("JSON"));
    } else if !a.quiet {
        print_summary(&a, out, set);
    }
    Ok(0)
}

fn reason_counts(out: &Extraction) -> serde_json::Map<String, serde_json::Value> {
    let mut m = serde_json::Map::new();
    for r in Reason::ALL {
        let n = out.masked.iter().filter(|c| c.reason == r).count();
        if n > 0 {
            m.insert(r.name().into(), json!(n));
        }
    }
    m
}

fn summary_json(out: &Extraction, set: &lacuna::TrialSet, elapsed: f64) -> serde_json::Value {
    let cells = out.epochs.len() * out.channels.len();
    json!({
        "epochs": out.epochs.len(),
        "trials": set.len(),
        "channels": out.channels.len(),
        "masked_cells": out.masked.len(),
        "masked_fraction": out.masked.len() as f64 / cells.max(1) as f64,
        "reasons": reason_counts(out),
        "empty_epochs": out.empty_epochs,
        "set_aside": out.set_aside,
        "notes": out.notes,
        "seconds": elapsed,
    })
}

fn print_summary(a: &ExtractArgs, out: &Extraction, set: &lacuna::TrialSet) {
    let cells = out.epochs.len() * out.channels.len();
    println!(
        "{} epochs × {} channels → {} trials; {} of {} cells masked ({:.1}%)",
        out.epochs.len(),
        out.channels.len(),
        set.len(),
        out.masked.len(),
        cells,
        100.0 * out.masked.len() as f64 / cells.max(1) as f64
    );
    for (reason, n) in reason_counts(out) {
        println!("  {reason:<22} {n}");
    }
    if !out.empty_epochs.is_empty() {
        println!(
            "  {} epoch(s) lost every channel and are not trials: {:?}",
            out.empty_epochs.len(),
            out.empty_epochs
        );
    }
    for note in &out.notes {
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

#[allow(clippy::too_many_arguments)]
fn write_outputs(
    a: &ExtractArgs,
    out: &Extraction,
    set: &lacuna::TrialSet,
    sources: &[(String, String)],
    opts: &ExtractOptions,
    elapsed: f64,
    unit: Option<&str>,
) -> Result<()> {
    // Everything is encoded before the first file is written.
    let mask_csv = encode_mask_csv(set);
    let mut labels = String::from("label,session\n");
    let kept: Vec<usize> = (0..out.epochs.len())
        .filter(|e| !out.empty_epochs.contains(e))
        .collect();
    for &e in &kept {
        let info = &out.epochs[e];
        labels.push_str(&lacuna::trials::io::csv_row(&[
            info.label.clone().unwrap_or_default(),
            info.session.clone(),
        ]));
    }
    let p = out.channels.len();
    let epochs_json: Vec<serde_json::Value> = out
        .epochs
        .iter()
        .enumerate()
        .map(|(e, info)| {
            let masked: Vec<serde_json::Value> = out
                .masked
                .iter()
                .filter(|m| m.epoch == e)
                .map(|m| json!({"channel": m.channel, "reason": m.reason.name()}))
                .collect();
            json!({
                "epoch": e,
                "trial": kept.iter().position(|&k| k == e),
                "session": info.session,
                "onset_s": info.onset,
                "duration_s": info.duration,
                "label": info.label,
                "observed_channels": info.observed,
                "shrinkage": info.shrinkage,
                "rank": info.rank,
                "masked": masked,
            })
        })
        .collect();
    let provenance = {
        let mut paths: Vec<&Path> = a.recordings.iter().map(PathBuf::as_path).collect();
        paths.extend(a.events.iter().map(PathBuf::as_path));
        for p in [&a.epochs, &a.mask].into_iter().flatten() {
            paths.push(p);
        }
        lacuna::report::provenance::provenance(&paths)?
    };
    let lengths: Vec<usize> = out.epochs.iter().map(|e| e.samples).collect();
    let samples_per_epoch = lengths
        .first()
        .filter(|&&f| lengths.iter().all(|&x| x == f))
        .copied();
    let meta = json!({
        "lacuna_epochs_version": "1",
        "lacuna_version": env!("CARGO_PKG_VERSION"),
        "caution": "Research software, not a medical device: results inform analysis; they do not diagnose.",
        "channels": out.channels,
        "sessions": sources.iter().map(|(s, f)| json!({"session": s, "source": f})).collect::<Vec<_>>(),
        "sampling_rates_hz": out.sampling_rates,
        "band_hz": opts.band.map(|(l, h)| vec![l, h]),
        "filter": opts.band.map(|_| format!("Butterworth order {} band-pass, forward-backward (zero phase)", opts.order)),
        "estimator": opts.estimator.name(),
        // Every window has the same length when all of them do; later
        // commands (compare --epochs) take T and the degrees of freedom here.
        "samples_per_epoch": samples_per_epoch,
        "unit": unit.map(super::display_unit),
        "covariance_unit": super::covariance_unit(unit),
        "provenance": provenance,
        "detection": opts.detect,
        "user_bad_channels": opts.bad_channels,
        "user_mask": a.mask.as_ref().map(|m| m.display().to_string()),
        "set_aside": out.set_aside,
        "notes": out.notes,
        "summary": summary_json(out, set, elapsed),
        "epochs": epochs_json,
        "masked_per_channel": out.channels.iter().map(|c| json!({
            "channel": c,
            "masked": out.masked.iter().filter(|m| &m.channel == c).count(),
        })).collect::<Vec<_>>(),
        "cells": out.epochs.len() * p,
    });
    let report = a.mask_report.as_ref().map(|_| {
        let mut s = String::from(
            "epoch,session,onset_s,channel,reason,non_finite,rail_fraction,robust_sd,high_band_mad,max_correlation\n",
        );
        for m in &out.masked {
            let info = &out.epochs[m.epoch];
            s.push_str(&lacuna::trials::io::csv_row(&[
                m.epoch.to_string(),
                info.session.clone(),
                info.onset.to_string(),
                m.channel.clone(),
                m.reason.name().to_string(),
                m.stats.non_finite.to_string(),
                m.stats.rail_fraction.to_string(),
                m.stats.robust_sd.to_string(),
                m.stats.high_band_mad.map_or(String::new(), |v| v.to_string()),
                m.stats.max_correlation.to_string(),
            ]));
        }
        s
    });
    let mut files = vec![
        (a.out.join("covs.npy"), encode_stack_with_nan(set)),
        (a.out.join("mask.npy"), encode_mask(set)),
        (a.out.join("mask.csv"), mask_csv),
        (a.out.join("labels.csv"), labels.into_bytes()),
        (
            a.out.join("epochs.json"),
            serde_json::to_string_pretty(&meta)
                .unwrap_or_default()
                .into_bytes(),
        ),
    ];
    if let (Some(path), Some(text)) = (&a.mask_report, report) {
        files.push((path.clone(), text.into_bytes()));
    }
    lacuna::output::write_outputs(Some(&a.out), files)
}

//! `lacuna compare`: every scheme on the same trial set, side by side, the
//! evidence for choosing one, and per-channel contributions.

use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use clap::Args;

use super::progress::Progress;
use lacuna::jobs::comparison::SchemeRow;
use lacuna::jobs::{CompareJob, Comparison, ExtractionRecord};
use lacuna::report::tables;
use lacuna::select::Target;
use lacuna::trials::io::{encode_matrix, load_trial_set, read_labels};
use lacuna::{LacunaError, Result};

const EXAMPLE: &str = "Example (after `lacuna extract … --out trials`):
  lacuna compare --covs trials/covs.npy --mask trials/mask.csv --labels trials/labels.csv \\
                 --positions 10-10 --out comparison

Writes comparison/means/<scheme>.npy and .csv, comparison.csv, distances.csv,
validation.csv, contributions.csv and compare.json.";

#[derive(Args, Debug)]
#[command(
    after_help = format!("{EXAMPLE}\n\n`--help` (not -h) also defines every column of those tables."),
    after_long_help = format!("{EXAMPLE}\n\n{}", lacuna::report::glossary::help_text(lacuna::report::glossary::COMPARE))
)]
pub struct CompareArgs {
    /// What the mean is for: `centre` (the Riemannian centre, for
    /// minimum-distance decoding and re-centring; a common scale factor is
    /// harmless) or `population` (the population covariance, for spatial
    /// filters, whitening, source models and power across window lengths).
    /// It decides the references the schemes are ranked against; the report
    /// always states it.
    #[arg(long, default_value = "centre", value_parser = ["centre", "population"])]
    target: String,
    /// Degrees of freedom of the covariances for the scale-bias-corrected
    /// masked mean (target population), when not --samples minus one.
    #[arg(long, value_name = "N")]
    effective_samples: Option<f64>,
    /// Physical unit of the data the covariances came from (e.g. µV); the
    /// report gives covariances in its square. compare takes it from
    /// --epochs when not given.
    #[arg(long, value_name = "UNIT")]
    unit: Option<String>,
    /// Channel names for a stack without a CSV mask (which otherwise get
    /// ch0, ch1, …): comma-separated, or a file of names.
    #[arg(long, value_name = "NAMES|FILE")]
    channels: Option<String>,
    /// Covariance stack: NPY float64 (N, p, p), NaN where unobserved allowed.
    #[arg(long, value_name = "STACK.npy")]
    covs: PathBuf,
    /// Observation mask (NPY or CSV with channel names); see `lacuna mean --help`.
    #[arg(long, value_name = "MASK")]
    mask: Option<PathBuf>,
    /// Trial labels (CSV with a `label` column; `session` optional) for the decoding check.
    #[arg(long, value_name = "LABELS.csv")]
    labels: Option<PathBuf>,
    /// Electrode positions for spherical-spline: `10-20` or `10-10`
    /// (standard positions computed by lacuna, matched to the channel names),
    /// or a CSV `channel,x,y,z` of your own.
    #[arg(long, value_name = "10-10|FILE.csv")]
    positions: Option<PathBuf>,
    /// Samples per trial, when known (shrinkage then uses OAS intensities).
    #[arg(long, value_name = "T")]
    samples: Option<usize>,
    /// Only these schemes (comma-separated; `diagonal-loading` means its whole λ grid).
    #[arg(long, value_delimiter = ',', value_name = "NAMES")]
    schemes: Vec<String>,
    /// Output folder.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Simulated-dropout repeats.
    #[arg(long, default_value_t = 20)]
    repeats: usize,
    /// Folds of the held-out fit and decoding checks.
    #[arg(long, default_value_t = 5)]
    folds: usize,
    /// Bootstrap resamples for the per-channel spread (0 = none).
    #[arg(long, default_value_t = 10)]
    bootstrap: usize,
    /// Skip leave-one-channel-out re-solves.
    #[arg(long)]
    no_leave_out: bool,
    /// Most trials the leave-one-channel-out re-solves use: beyond that, the
    /// influence is measured on one seeded random subset of this size (its
    /// own mean against the subset without each channel), which bounds the
    /// cost of the p re-solves on large sets.
    #[arg(long, default_value_t = lacuna::diagnose::contribution::LEAVE_OUT_TRIALS, value_name = "N")]
    leave_out_trials: usize,
    /// Skip the selection protocols (only the side-by-side table).
    #[arg(long)]
    no_validation: bool,
    /// Seed for every random choice (validation, folds, bootstrap).
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Stopping tolerance of the iterative schemes (the same default as
    /// `lacuna mean`; the selection protocols stop their re-solves at
    /// max(tol, 1e-5), see docs/selection.md).
    #[arg(long, default_value = "1e-10", value_name = "TOL")]
    tol: f64,
    /// λ values of the diagonal-loading grid (load = λ·trace/p).
    #[arg(
        long,
        value_delimiter = ',',
        default_value = "1e-4,1e-3,1e-2,1e-1",
        value_name = "L1,L2,…",
        allow_hyphen_values = true
    )]
    loading_grid: Vec<f64>,
    /// α of the shrinkage scheme, in (0, 1].
    #[arg(
        long,
        default_value = "0.1",
        value_name = "ALPHA",
        allow_hyphen_values = true
    )]
    shrinkage: f64,
    /// Leave out channels that no trial observed instead of refusing.
    #[arg(long)]
    drop_unobserved: bool,
    /// Also write the self-contained HTML report to this file.
    #[arg(long, value_name = "REPORT.html")]
    html: Option<PathBuf>,
    /// The epochs.json of `lacuna extract`, for the dropout raster in --html.
    #[arg(long, value_name = "epochs.json")]
    epochs: Option<PathBuf>,
    /// Print the summary JSON on stdout.
    #[arg(long)]
    json: bool,
    /// No progress messages.
    #[arg(long)]
    quiet: bool,
}

/// Progress bars for the job's stages: a new bar when the stage changes.
fn stage_bars(quiet: bool) -> lacuna::jobs::compare::CompareProgress {
    let current: Mutex<Option<(String, Progress)>> = Mutex::new(None);
    Arc::new(move |stage: &str, done: usize, total: usize| {
        let Ok(mut cur) = current.lock() else { return };
        if cur.as_ref().is_none_or(|(s, _)| s != stage) {
            if let Some((_, bar)) = cur.take() {
                bar.finish();
            }
            *cur = Some((stage.to_string(), Progress::new(stage, total, quiet)));
        }
        if done > 0
            && let Some((_, bar)) = cur.as_ref()
        {
            bar.step();
            if done >= total {
                bar.finish();
            }
        }
    })
}

pub fn run(mut a: CompareArgs) -> Result<i32> {
    {
        let positions_file = super::positions_file(&a.positions).map(PathBuf::from);
        let mut inputs: Vec<(&str, &Path)> = vec![("--covs", &a.covs)];
        for (o, p) in [
            ("--mask", &a.mask),
            ("--labels", &a.labels),
            ("--positions", &positions_file),
            ("--epochs", &a.epochs),
        ] {
            if let Some(p) = p {
                inputs.push((o, p));
            }
        }
        // An --html inside the output folder is written with the folder.
        let html_outside: Vec<(&str, &Path)> = a
            .html
            .iter()
            .filter(|h| !h.starts_with(&a.out))
            .map(|h| ("--html", h.as_path()))
            .collect();
        lacuna::output::check_paths(&inputs, &html_outside, &[("--out", &a.out)])?;
    }
    // T and the unit from the extraction's epochs.json when not given.
    let epochs: Option<ExtractionRecord> = match &a.epochs {
        Some(e) => Some(super::report::read_typed(
            e,
            "an epochs.json of `lacuna extract`",
        )?),
        None => None,
    };
    if let Some(rec) = &epochs {
        a.samples = a.samples.or(rec.samples_per_epoch);
        a.unit = a.unit.clone().or_else(|| rec.unit.clone());
    }
    let mut job = CompareJob {
        target: if a.target == "population" {
            Target::Population
        } else {
            Target::Centre
        },
        effective_samples: a.effective_samples,
        unit: a.unit.clone(),
        samples: a.samples,
        schemes: a.schemes.clone(),
        positions: None,
        repeats: a.repeats,
        folds: a.folds,
        bootstrap: a.bootstrap,
        no_leave_out: a.no_leave_out,
        leave_out_trials: a.leave_out_trials,
        no_validation: a.no_validation,
        seed: a.seed,
        tol: a.tol,
        loading_grid: a.loading_grid.clone(),
        shrinkage: a.shrinkage,
        drop_unobserved: a.drop_unobserved,
    };
    // Every setting checked before any file is read.
    job.validate()?;
    // Folds and repeats run side by side on copies of trial subsets: peak
    // resident memory measured at 5.3× the file (2 000 trials × 32 channels:
    // 86 MB for a 16 MB stack); 8× leaves a margin.
    if let Ok(m) = std::fs::metadata(&a.covs) {
        lacuna::limits::check_fits("lacuna compare", 8 * m.len(), rayon::current_num_threads())?;
    }
    let mut set = load_trial_set(&a.covs, a.mask.as_deref(), None)?;
    set = super::apply_channel_names(set, a.channels.as_deref(), a.mask.as_deref())?;
    if let Some(path) = &a.labels {
        let (labels, sessions) = read_labels(path, set.len())?;
        set.labels = Some(labels);
        set.sessions = sessions;
    }
    if let Some(spec) = &a.positions {
        job.positions = Some(super::load_positions(spec, set.channels())?);
    }
    let observed: Vec<Vec<usize>> = set.trials().iter().map(|t| t.observed.clone()).collect();
    let channels_in = set.channels().to_vec();
    let mut result = job.run(set, Some(stage_bars(a.quiet)))?;
    result.provenance = Some({
        let mut paths: Vec<&Path> = vec![&a.covs];
        for p in [&a.mask, &a.labels, &a.epochs].into_iter().flatten() {
            paths.push(p);
        }
        paths.extend(super::positions_file(&a.positions));
        lacuna::report::provenance::provenance(&paths)?
    });
    // The raster must describe the trials as given.
    if let (Some(rec), Some(e)) = (&epochs, &a.epochs) {
        lacuna::report::epochs_check::check_epochs_match(
            rec,
            &channels_in,
            result.trials,
            Some(&observed),
        )
        .map_err(|why| LacunaError::Format {
            path: e.clone(),
            message: format!("does not describe this trial set: {why}; pass the epochs.json written with these covariances"),
        })?;
    }
    let files = output_files(&a.out, a.html.as_deref(), &result, epochs.as_ref());
    lacuna::output::write_outputs(Some(&a.out), files)?;
    if a.json {
        println!(
            "{}",
            String::from_utf8_lossy(&lacuna::output::json_bytes(&result))
        );
    } else if !a.quiet {
        print_summary(&result);
        println!("wrote {}", a.out.display());
        if let Some(h) = &a.html {
            println!("wrote {}", h.display());
        }
    }
    Ok(0)
}

/// Every output file, encoded from the typed result before any is written.
fn output_files(
    out: &Path,
    html: Option<&Path>,
    c: &Comparison,
    epochs: Option<&ExtractionRecord>,
) -> Vec<(PathBuf, Vec<u8>)> {
    let mut files = Vec::new();
    for m in c.schemes.iter().filter_map(SchemeRow::ok) {
        let mean = m.mean_matrix();
        for ext in ["npy", "csv"] {
            let path = out.join("means").join(format!("{}.{ext}", m.file_stem()));
            let bytes = encode_matrix(&path, &mean, &c.channels);
            files.push((path, bytes));
        }
    }
    files.push((out.join("comparison.csv"), tables::comparison(c)));
    files.push((out.join("distances.csv"), tables::distances(c)));
    if let Some(v) = tables::validation(c) {
        files.push((out.join("validation.csv"), v));
    }
    if let Some(cs) = &c.contributions {
        files.push((out.join("contributions.csv"), tables::contributions(cs)));
    }
    files.push((out.join("compare.json"), lacuna::output::json_bytes(c)));
    if let Some(path) = html {
        files.push((
            path.to_path_buf(),
            lacuna::report::html::render(c, epochs).into_bytes(),
        ));
    }
    files
}

fn print_summary(c: &Comparison) {
    println!(
        "{} trials × {} channels, {} schemes, {:.1} s",
        c.trials,
        c.channels.len(),
        c.schemes.len(),
        c.seconds
    );
    println!(
        "{:<26} {:>9} {:>6} {:>11} {:>10}",
        "scheme", "converged", "iter", "dispersion", "seconds"
    );
    for row in &c.schemes {
        match row {
            SchemeRow::Ok(m) => println!(
                "{:<26} {:>9} {:>6} {:>11.4} {:>10.3}",
                m.scheme, m.converged, m.iterations, m.dispersion, m.seconds
            ),
            SchemeRow::NotApplicable { scheme, reason } => {
                println!("{scheme:<26} not applicable: {reason}")
            }
        }
    }
    if let Some(r) = &c.recommendation {
        println!();
        println!("target: {}", r.target.name());
        match &r.scheme {
            Some(s) if r.clear => println!("recommended: {s}"),
            Some(s) => println!(
                "no clear winner; best on {}: {s} (tied: {})",
                r.primary.replace('-', " "),
                r.tied.join(", ")
            ),
            None => println!("no recommendation"),
        }
        for reason in &r.reasons {
            println!("  - {reason}");
        }
    }
}

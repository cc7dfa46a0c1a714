//! `lacuna train` and `lacuna classify`: the masked minimum-distance-to-mean
//! decoder (src/jobs/decoder.rs).

use std::path::PathBuf;

use clap::Args;
use lacuna::jobs::MeanJob;
use lacuna::jobs::decoder::{Model, TrainJob};
use lacuna::trials::io::load_trial_set;
use lacuna::{LacunaError, Result};

const TRAIN_EXAMPLE: &str = "Example (after `lacuna extract … --out trials`):
  lacuna train --covs trials/covs.npy --mask trials/mask.csv --labels trials/labels.csv --out model.json
  lacuna classify --model model.json --covs new/covs.npy --mask new/mask.csv --out predictions.csv

One mean per class (the masked mean unless --scheme says otherwise); a trial
goes to the class whose mean is nearest in affine-invariant distance on the
channels the trial observed. --folds K cross-validates; --by-session leaves
one session out at a time (with --recentre, each session re-centred first).
Decoding accuracy on research data says nothing about clinical use.";

#[derive(Args, Debug)]
#[command(after_help = TRAIN_EXAMPLE)]
pub struct TrainArgs {
    /// Covariance stack: NPY float64 (N, p, p), NaN where unobserved.
    #[arg(long, value_name = "STACK.npy")]
    covs: PathBuf,
    /// Observation mask: NPY (N, p) or CSV with a header of channel names.
    #[arg(long, value_name = "MASK")]
    mask: Option<PathBuf>,
    /// Channel names for a stack without a CSV mask: comma-separated, or a file.
    #[arg(long, value_name = "NAMES|FILE")]
    channels: Option<String>,
    /// Trial labels CSV (`label`, optional `session`): the classes.
    #[arg(long, value_name = "LABELS.csv")]
    labels: PathBuf,
    /// Where to write the model (JSON).
    #[arg(long, value_name = "MODEL.json")]
    out: PathBuf,
    /// Scheme of the class means (`lacuna schemes`).
    #[arg(long, default_value = "airm-observed", value_name = "NAME")]
    scheme: String,
    /// Cross-validate with this many folds (0 = none).
    #[arg(long, default_value_t = 5)]
    folds: usize,
    /// Cross-validate by leaving one session out at a time instead.
    #[arg(long)]
    by_session: bool,
    /// Re-centre every session at its own mean first (training and held-out
    /// sessions alike; needs sessions in --labels).
    #[arg(long)]
    recentre: bool,
    /// Seed of the folds.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Leave channels a class never observed out of its mean.
    #[arg(long)]
    drop_unobserved: bool,
    /// Print no summary.
    #[arg(long)]
    quiet: bool,
}

pub fn train(a: TrainArgs) -> Result<i32> {
    let job = TrainJob {
        mean: MeanJob {
            scheme: a.scheme.clone(),
            drop_unobserved: a.drop_unobserved,
            ..MeanJob::default()
        },
        folds: (a.folds != 0).then_some(a.folds),
        by_session: a.by_session,
        recentre: a.recentre,
        seed: a.seed,
    };
    job.mean.options(None)?;
    if a.folds == 1 {
        return Err(LacunaError::OutOfRange {
            setting: "folds".into(),
            value: "1".into(),
            allowed: "0 (no cross-validation) or 2 and more".into(),
        });
    }
    let mut inputs: Vec<(&str, &std::path::Path)> =
        vec![("--covs", &a.covs), ("--labels", &a.labels)];
    if let Some(m) = &a.mask {
        inputs.push(("--mask", m));
    }
    lacuna::output::check_paths(&inputs, &[("--out", &a.out)], &[])?;
    let set = load_trial_set(&a.covs, a.mask.as_deref(), None)?;
    let mut set = super::apply_channel_names(set, a.channels.as_deref(), a.mask.as_deref())?;
    let (l, s) = lacuna::trials::io::read_labels(&a.labels, set.len())?;
    set.labels = Some(l);
    set.sessions = s;
    if a.recentre && set.sessions.is_none() {
        return Err(LacunaError::MissingSetting {
            setting: "labels".into(),
            needed_for: "--recentre (a labels file with a `session` column)".into(),
        });
    }
    let model = job.run(&set)?;
    let json = serde_json::to_string_pretty(&model).unwrap_or_default();
    lacuna::output::write_outputs(None, vec![(a.out.clone(), json.into_bytes())])?;
    if !a.quiet {
        println!(
            "lacuna train: {} trials, {} channels, {} classes ({}), class means by {}",
            set.len(),
            set.n_channels(),
            model.classes.len(),
            model
                .classes
                .iter()
                .zip(&model.training.trials)
                .map(|(c, n)| format!("{c}: {n}"))
                .collect::<Vec<_>>()
                .join(", "),
            model.scheme
        );
        if let Some(cv) = &model.training.cross_validation {
            println!(
                "  {}{}: accuracy {:.3}, balanced accuracy {:.3} (chance {:.3}); per fold {}",
                cv.scheme,
                if a.recentre { " after re-centring" } else { "" },
                cv.overall_accuracy,
                cv.overall_balanced_accuracy,
                cv.chance,
                cv.accuracy
                    .iter()
                    .map(|v| format!("{v:.2}"))
                    .collect::<Vec<_>>()
                    .join(" ")
            );
            println!(
                "  confusion (rows true, columns predicted, order {}):",
                model.classes.join(", ")
            );
            for row in &cv.confusion {
                println!(
                    "    {}",
                    row.iter().map(|v| format!("{v:>5}")).collect::<String>()
                );
            }
        }
        println!("  wrote {}", a.out.display());
    }
    if model.training.converged.iter().any(|c| !c) {
        eprintln!("warning: a class mean did not converge; the model was written, but check it");
        return Ok(4);
    }
    Ok(0)
}

#[derive(Args, Debug)]
pub struct ClassifyArgs {
    /// A model written by `lacuna train`.
    #[arg(long, value_name = "MODEL.json")]
    model: PathBuf,
    /// Covariance stack: NPY float64 (N, p, p), NaN where unobserved.
    #[arg(long, value_name = "STACK.npy")]
    covs: PathBuf,
    /// Observation mask: NPY (N, p) or CSV with a header of channel names
    /// (the names are matched to the model's).
    #[arg(long, value_name = "MASK")]
    mask: Option<PathBuf>,
    /// Channel names for a stack without a CSV mask: comma-separated, or a file.
    #[arg(long, value_name = "NAMES|FILE")]
    channels: Option<String>,
    /// Where to write the predictions: CSV with the trial, the class and the
    /// distance to every class mean.
    #[arg(long, value_name = "PREDICTIONS.csv")]
    out: PathBuf,
    /// True labels, when known: the accuracy is printed. Its `session`
    /// column tells a model trained with --recentre how to re-centre.
    #[arg(long, value_name = "LABELS.csv")]
    labels: Option<PathBuf>,
    /// Print no summary.
    #[arg(long)]
    quiet: bool,
}

pub fn classify(a: ClassifyArgs) -> Result<i32> {
    let mut inputs: Vec<(&str, &std::path::Path)> =
        vec![("--model", &a.model), ("--covs", &a.covs)];
    for (o, p) in [("--mask", &a.mask), ("--labels", &a.labels)] {
        if let Some(p) = p {
            inputs.push((o, p));
        }
    }
    lacuna::output::check_paths(&inputs, &[("--out", &a.out)], &[])?;
    let bytes = lacuna::trials::io::read_regular_file(&a.model)?;
    let model: Model = serde_json::from_slice(&bytes).map_err(|e| LacunaError::Format {
        path: a.model.clone(),
        message: format!("not a lacuna model: {e}"),
    })?;
    model.check().map_err(|e| LacunaError::Format {
        path: a.model.clone(),
        message: e.to_string(),
    })?;
    let set = load_trial_set(&a.covs, a.mask.as_deref(), None)?;
    let mut set = super::apply_channel_names(set, a.channels.as_deref(), a.mask.as_deref())?;
    let labels = match &a.labels {
        Some(path) => {
            let (l, s) = lacuna::trials::io::read_labels(path, set.len())?;
            set.sessions = s;
            Some(l)
        }
        None => None,
    };
    // A model trained on re-centred sessions sees data re-centred the same
    // way: each session (or all trials, without sessions) at its own mean.
    let predictions = model.classify(&set)?;
    let mut header = vec!["trial".to_string(), "class".to_string()];
    header.extend(model.classes.iter().map(|c| format!("distance to {c}")));
    let rows = predictions.iter().enumerate().map(|(i, p)| {
        let mut r = vec![i.to_string(), p.class.clone()];
        r.extend(p.distances.iter().map(|d| format!("{d:.10e}")));
        r
    });
    let csv = lacuna::report::tables::table(&header, rows);
    lacuna::output::write_outputs(None, vec![(a.out.clone(), csv)])?;
    if !a.quiet {
        println!(
            "lacuna classify: {} trials with the model of {} ({} classes); wrote {}",
            set.len(),
            a.model.display(),
            model.classes.len(),
            a.out.display()
        );
        if model.recentred {
            println!(
                "  the model was trained on re-centred sessions: {} re-centred first, {}",
                if set.sessions.is_some() {
                    "each session was"
                } else {
                    "all trials were"
                },
                if set.sessions.is_some() {
                    "by its own mean"
                } else {
                    "as one session (give --labels with a session column to re-centre per session)"
                }
            );
        }
        if let (Some(path), Some(labels)) = (&a.labels, &labels) {
            let right = labels
                .iter()
                .zip(&predictions)
                .filter(|(l, p)| **l == p.class)
                .count();
            println!(
                "  accuracy against {}: {:.3} ({right} of {})",
                path.display(),
                right as f64 / set.len() as f64,
                set.len()
            );
        }
    }
    Ok(0)
}

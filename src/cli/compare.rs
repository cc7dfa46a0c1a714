//! `lacuna compare`: every scheme on the same trial set, side by side, the
//! evidence for choosing one, and per-channel contributions.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Instant;

use clap::Args;

use super::progress::Progress;
use lacuna::diagnose::{ContributionOptions, contributions, identifiability};
use lacuna::schemes::MeanResult;
use lacuna::select::{
    FitCriterion, SelectOptions, Target, decoding, default_candidates, held_out_fit,
    matching_blocks, recommend, regularized_candidates, simulated_dropout,
};
use lacuna::spd::distance::airm_distance;
use lacuna::spd::{Mat, condition_number, log_det};
use lacuna::trials::TrialSet;
use lacuna::trials::io::{encode_matrix, load_trial_set, read_labels, read_positions};
use lacuna::{LacunaError, Result, SchemeOptions};
use rayon::prelude::*;
use serde_json::json;

const EXAMPLE: &str = "Example (after `lacuna extract … --out trials`):
  lacuna compare --covs trials/covs.npy --mask trials/mask.csv --labels trials/labels.csv \\
                 --positions demo-data/recording/positions.csv --out comparison

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
    /// Electrode positions (CSV `channel,x,y,z`) for spherical-spline.
    #[arg(long, value_name = "FILE.csv")]
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
    /// Skip the selection protocols (only the side-by-side table).
    #[arg(long)]
    no_validation: bool,
    /// Seed for every random choice (validation, folds, bootstrap).
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Stopping tolerance of the iterative schemes.
    #[arg(long, default_value_t = 1e-8)]
    tol: f64,
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

fn common_channels(a: &MeanResult, b: &MeanResult, p: usize) -> Vec<usize> {
    let ea = a
        .diagnostics
        .estimated_channels
        .clone()
        .unwrap_or_else(|| (0..p).collect());
    let eb = b
        .diagnostics
        .estimated_channels
        .clone()
        .unwrap_or_else(|| (0..p).collect());
    ea.into_iter().filter(|c| eb.contains(c)).collect()
}

fn block(m: &Mat, o: &[usize]) -> Mat {
    Mat::from_fn(o.len(), o.len(), |i, j| m[(o[i], o[j])])
}

/// Weighted mean squared distance of observed blocks to the mean's sub-blocks,
/// and the weighted mean of log det M_oo − log det C_i (swelling).
fn dispersion_and_gap(set: &TrialSet, r: &MeanResult) -> (f64, f64) {
    let w = set.normalized_weights();
    let est = r.diagnostics.estimated_channels.clone();
    let parts: Vec<(f64, f64)> = set
        .trials()
        .par_iter()
        .zip(w.par_iter())
        .map(|(t, &wi)| {
            let Some((m, c)) = matching_blocks(&r.mean, est.as_deref(), t) else {
                return (0.0, 0.0);
            };
            let d = airm_distance(&m, &c);
            let gap = log_det(&m).unwrap_or(f64::NAN) - log_det(&c).unwrap_or(f64::NAN);
            (wi * d * d, wi * gap)
        })
        .collect();
    parts
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x, b + y))
}

fn spread_json(s: &lacuna::select::Score) -> serde_json::Value {
    json!({
        "scheme": s.candidate,
        "median": s.spread.map(|x| x.median),
        "q1": s.spread.map(|x| x.q1),
        "q3": s.spread.map(|x| x.q3),
        "n": s.spread.map(|x| x.n),
        "partial_channels": s.partial,
        "failures": s.failures,
        "failure_reason": s.failure_reason,
    })
}

fn csv_cell(s: &str) -> String {
    if s.contains([',', '"', '\n']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

pub fn run(mut a: CompareArgs) -> Result<i32> {
    {
        let mut inputs: Vec<(&str, &std::path::Path)> = vec![("--covs", &a.covs)];
        for (o, p) in [
            ("--mask", &a.mask),
            ("--labels", &a.labels),
            ("--positions", &a.positions),
            ("--epochs", &a.epochs),
        ] {
            if let Some(p) = p {
                inputs.push((o, p));
            }
        }
        // An --html inside the output folder is written with the folder.
        let html_outside: Vec<(&str, &std::path::Path)> = a
            .html
            .iter()
            .filter(|h| !h.starts_with(&a.out))
            .map(|h| ("--html", h.as_path()))
            .collect();
        lacuna::output::check_paths(&inputs, &html_outside, &[("--out", &a.out)])?;
    }
    // T and the unit from the extraction's epochs.json when not given.
    if let Some(e) = &a.epochs
        && (a.samples.is_none() || a.unit.is_none())
    {
        let doc = super::report::read_json(e)?;
        if a.samples.is_none() {
            a.samples = doc["samples_per_epoch"].as_u64().map(|t| t as usize);
        }
        if a.unit.is_none() {
            a.unit = doc["unit"].as_str().map(str::to_string);
        }
    }
    {
        use super::ranges::{float_in, int_in};
        float_in("--tol", a.tol, 1e-300, 0.1)?;
        int_in("--folds", a.folds, 2, 100)?;
        int_in("--repeats", a.repeats, 1, 10_000)?;
        int_in("--bootstrap", a.bootstrap, 0, 10_000)?;
        if let Some(t) = a.samples {
            int_in("--samples", t, 2, 1_000_000_000)?;
        }
    }
    let say = |msg: &str| {
        if !a.quiet && std::io::stderr().is_terminal() {
            eprintln!("{msg}");
        }
    };
    let started = Instant::now();
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
    let ident = identifiability(&set);
    if !ident.never_observed.is_empty() {
        if !a.drop_unobserved {
            return Err(LacunaError::Unsupported(format!(
                "channel {} is observed in no trial; pass --drop-unobserved to leave it out",
                set.channels()[ident.never_observed[0]]
            )));
        }
        set = set.without_channels(&ident.never_observed)?;
    }
    let p = set.n_channels();
    let base = SchemeOptions {
        stop: lacuna::solve::StopRule {
            tol: a.tol,
            max_iter: 500,
        },
        samples: a.samples,
        positions: match &a.positions {
            Some(path) => Some(Arc::new(super::positions_by_name(
                read_positions(path, set.channels())?,
                set.channels(),
            ))),
            None => None,
        },
        seed: a.seed,
        ..SchemeOptions::default()
    };
    // Every name must be a scheme (or one point of the loading grid): a typo
    // must not silently shrink the comparison to the names that matched.
    let valid: Vec<&'static str> = lacuna::all_schemes()
        .into_iter()
        .filter(|s| s.handles_missing())
        .map(|s| s.name())
        .collect();
    for name in &a.schemes {
        let grid_point = name.starts_with("diagonal-loading(") && name.ends_with(')');
        if !valid.contains(&name.as_str()) && !grid_point {
            let hint = lacuna::schemes::closest_scheme_name(name)
                .map(|n| format!(" (did you mean '{n}'?)"))
                .unwrap_or_default();
            return Err(LacunaError::InvalidOption(format!(
                "--schemes: '{name}' is not a scheme that accepts missing channels{hint}. Valid names: {}",
                valid.join(", ")
            )));
        }
    }
    let target = if a.target == "population" {
        Target::Population
    } else {
        Target::Centre
    };
    let ranks = lacuna::diagnose::rank_table(&set, a.samples);
    let rank_deficient = !ranks.deficient.is_empty();
    let mut candidates = default_candidates(&base, &a.schemes);
    // The population target also weighs the masked mean with its
    // short-window scale bias removed, when the degrees of freedom are known.
    if target == Target::Population
        && !rank_deficient
        && (a.samples.is_some() || a.effective_samples.is_some())
        && (a.schemes.is_empty() || a.schemes.iter().any(|n| n == "airm-observed"))
    {
        let n = super::degrees_of_freedom(a.samples, a.effective_samples)?;
        candidates.push(lacuna::select::Candidate {
            label: "airm-observed+scale-corrected".into(),
            scheme: Box::new(lacuna::schemes::AirmObserved),
            options: SchemeOptions {
                scale_correction: Some(n),
                ..base.clone()
            },
        });
    }
    if rank_deficient && (a.schemes.is_empty() || a.schemes.iter().any(|n| n == "airm-observed")) {
        // Regularise-then-average: the masked mean over a grid of regularisers.
        candidates.extend(regularized_candidates(&base));
    }
    if candidates.is_empty() {
        return Err(LacunaError::InvalidOption(format!(
            "--schemes {}: none of these is a scheme that accepts missing channels (see `lacuna schemes`)",
            a.schemes.join(",")
        )));
    }
    let mut timings: Vec<(&str, f64)> = Vec::new();
    let t0 = Instant::now();
    let bar = Progress::new("schemes", candidates.len(), a.quiet);
    let results: Vec<(std::result::Result<MeanResult, String>, f64)> = candidates
        .par_iter()
        .map(|c| {
            let t = Instant::now();
            let r = c.run(&set).map_err(|e| e.to_string());
            bar.step();
            (r, t.elapsed().as_secs_f64())
        })
        .collect();
    bar.finish();
    timings.push(("schemes", t0.elapsed().as_secs_f64()));
    let ok: Vec<(usize, &MeanResult)> = results
        .iter()
        .enumerate()
        .filter_map(|(k, (r, _))| r.as_ref().ok().map(|m| (k, m)))
        .collect();
    let mut distances = vec![vec![None; candidates.len()]; candidates.len()];
    for &(i, ri) in &ok {
        for &(j, rj) in &ok {
            let ch = common_channels(ri, rj, p);
            distances[i][j] = Some(if i == j {
                0.0
            } else {
                airm_distance(&block(&ri.mean, &ch), &block(&rj.mean, &ch))
            });
        }
    }
    let sel_opts = SelectOptions {
        target,
        criterion: if target == Target::Population || rank_deficient {
            FitCriterion::Likelihood
        } else {
            FitCriterion::AffineDistance
        },
        repeats: a.repeats,
        folds: a.folds,
        seed: a.seed,
        ..SelectOptions::default()
    };
    let (dropout, fit, dec, rec) = if a.no_validation {
        (None, None, None, None)
    } else {
        // One progress bar per protocol, advanced after each repeat or fold.
        let with_bar = |label: &str, total: usize| {
            let bar = Arc::new(Progress::new(label, total, a.quiet));
            let b = bar.clone();
            let opts = SelectOptions {
                on_step: Some(Arc::new(move || b.step())),
                ..sel_opts.clone()
            };
            (bar, opts)
        };
        // Rank-deficient trials have no complete-data Riemannian reference
        // and infinite distances to any SPD mean: only the held-out
        // likelihood is defined there.
        let t = Instant::now();
        let dropout = if rank_deficient {
            None
        } else {
            let (bar, o) = with_bar("simulated dropout (repeats)", a.repeats);
            let d = simulated_dropout(&set, &candidates, &o)?;
            bar.finish();
            Some(d)
        };
        timings.push(("simulated_dropout", t.elapsed().as_secs_f64()));
        let t = Instant::now();
        let (bar, o) = with_bar("held-out fit (folds)", a.folds);
        let fit = held_out_fit(&set, &candidates, &o)?;
        bar.finish();
        timings.push(("held_out_fit", t.elapsed().as_secs_f64()));
        let t = Instant::now();
        let dec = if rank_deficient {
            None
        } else {
            let (bar, o) = with_bar("decoding (folds)", a.folds);
            let d = decoding(&set, &candidates, &o)?;
            bar.finish();
            d
        };
        timings.push(("decoding", t.elapsed().as_secs_f64()));
        let rec = recommend(dropout.as_ref(), Some(&fit), dec.as_ref(), target, p);
        (dropout, Some(fit), dec, Some(rec))
    };
    // Contributions to the masked mean.
    let masked = candidates
        .iter()
        .position(|c| c.label == "airm-observed")
        .and_then(|k| results[k].0.as_ref().ok());
    let contrib = match masked {
        Some(m) => {
            say("per-channel contributions");
            let t = Instant::now();
            let c = contributions(
                &set,
                &m.mean,
                &ContributionOptions {
                    leave_one_out: !a.no_leave_out,
                    bootstrap: a.bootstrap,
                    seed: a.seed,
                    scheme_options: base.clone(),
                },
            )?;
            timings.push(("contributions", t.elapsed().as_secs_f64()));
            Some(c)
        }
        None => None,
    };
    let elapsed = started.elapsed().as_secs_f64();

    // Encode everything before writing anything.
    let mut files: Vec<(PathBuf, Vec<u8>)> = Vec::new();
    let means_dir = a.out.join("means");
    let mut table = String::from(
        "scheme,status,converged,iterations,seconds,condition_number,log_det,log_det_gap,dispersion,estimated_channels,notes\n",
    );
    let mut rows = Vec::new();
    let mut dispersions = vec![f64::NAN; candidates.len()];
    for (k, c) in candidates.iter().enumerate() {
        let (r, secs) = &results[k];
        match r {
            Ok(m) => {
                let (disp, gap) = dispersion_and_gap(&set, m);
                dispersions[k] = disp;
                let est = m
                    .diagnostics
                    .estimated_channels
                    .as_ref()
                    .map_or(p, Vec::len);
                let safe = c.label.replace(['(', ')'], "_");
                // Files carry NaN where the scheme estimated nothing; the
                // condition number and log det describe the estimated block.
                let published = m.published();
                let est_idx: Vec<usize> = m
                    .diagnostics
                    .estimated_channels
                    .clone()
                    .unwrap_or_else(|| (0..p).collect());
                let est_block = block(&m.mean, &est_idx);
                files.push((
                    means_dir.join(format!("{safe}.npy")),
                    encode_matrix(
                        &means_dir.join(format!("{safe}.npy")),
                        &published,
                        set.channels(),
                    ),
                ));
                files.push((
                    means_dir.join(format!("{safe}.csv")),
                    encode_matrix(
                        &means_dir.join(format!("{safe}.csv")),
                        &published,
                        set.channels(),
                    ),
                ));
                table.push_str(&format!(
                    "{},ok,{},{},{:.4},{:.6e},{:.6},{:.6},{:.6},{},{}\n",
                    csv_cell(&c.label),
                    m.diagnostics.converged,
                    m.diagnostics.iterations,
                    secs,
                    condition_number(&est_block),
                    log_det(&est_block).unwrap_or(f64::NAN),
                    gap,
                    disp,
                    est,
                    csv_cell(&m.diagnostics.notes.join("; "))
                ));
                rows.push(json!({
                    "scheme": c.label,
                    "status": "ok",
                    "converged": m.diagnostics.converged,
                    "iterations": m.diagnostics.iterations,
                    "seconds": secs,
                    "condition_number": condition_number(&est_block),
                    "log_det": log_det(&est_block),
                    "log_det_gap": gap,
                    "dispersion": disp,
                    "estimated_channels": est,
                    "notes": m.diagnostics.notes,
                    "mean_file": format!("means/{safe}.npy"),
                    "mean": (0..p).map(|i| (0..p).map(|j| published[(i, j)]).collect::<Vec<f64>>()).collect::<Vec<_>>(),
                    "trace": m.diagnostics.trace,
                }));
            }
            Err(e) => {
                table.push_str(&format!(
                    "{},not applicable,,,,,,,,,{}\n",
                    csv_cell(&c.label),
                    csv_cell(e)
                ));
                rows.push(json!({"scheme": c.label, "status": "not applicable", "reason": e}));
            }
        }
    }
    files.push((a.out.join("comparison.csv"), table.into_bytes()));
    let labels: Vec<&str> = candidates.iter().map(|c| c.label.as_str()).collect();
    let mut dist_csv = format!(
        "scheme,{}\n",
        labels
            .iter()
            .map(|l| csv_cell(l))
            .collect::<Vec<_>>()
            .join(",")
    );
    for (i, row) in distances.iter().enumerate() {
        dist_csv.push_str(&csv_cell(labels[i]));
        for d in row {
            dist_csv.push(',');
            if let Some(d) = d {
                dist_csv.push_str(&format!("{d:.6}"));
            }
        }
        dist_csv.push('\n');
    }
    files.push((a.out.join("distances.csv"), dist_csv.into_bytes()));
    let mut val_csv = String::from("protocol,scheme,median,q1,q3,n,failures\n");
    let mut add = |name: &str, scores: &[lacuna::select::Score]| {
        for s in scores {
            let f = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:.6}"));
            val_csv.push_str(&format!(
                "{name},{},{},{},{},{},{}\n",
                csv_cell(&s.candidate),
                f(s.spread.map(|x| x.median)),
                f(s.spread.map(|x| x.q1)),
                f(s.spread.map(|x| x.q3)),
                s.spread.map_or(0, |x| x.n),
                s.failures
            ));
        }
    };
    if let Some(d) = &dropout {
        add("simulated-dropout", &d.scores);
    }
    if let Some(f) = &fit {
        add("held-out-fit", &f.scores);
    }
    if let Some(d) = &dec {
        add("decoding-accuracy", &d.scores);
    }
    if dropout.is_some() {
        files.push((a.out.join("validation.csv"), val_csv.into_bytes()));
    }
    if let Some(cs) = &contrib {
        let mut s = String::from(
            "channel,trials_observed,weight_share,coobserved_with,cost_share,leave_out_influence,variance,variance_q05,variance_q95,correlation_sd\n",
        );
        let f = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v:.6e}"));
        for c in cs {
            s.push_str(&format!(
                "{},{},{:.6},{},{:.6},{},{:.6e},{},{},{}\n",
                csv_cell(&c.channel),
                c.trials_observed,
                c.weight_share,
                c.coobserved_with,
                c.cost_share,
                f(c.leave_out_influence),
                c.variance,
                f(c.variance_interval.map(|v| v[0])),
                f(c.variance_interval.map(|v| v[1])),
                f(c.correlation_sd)
            ));
        }
        files.push((a.out.join("contributions.csv"), s.into_bytes()));
    }
    let provenance = {
        let mut paths: Vec<&std::path::Path> = vec![&a.covs];
        for p in [&a.mask, &a.labels, &a.positions, &a.epochs]
            .into_iter()
            .flatten()
        {
            paths.push(p);
        }
        lacuna::report::provenance::provenance(&paths)?
    };
    let summary = json!({
        "compare_version": "1",
        "lacuna_version": env!("CARGO_PKG_VERSION"),
        "caution": "Research software, not a medical device: results inform analysis; they do not diagnose.",
        "trials": set.len(),
        "channels": set.channels(),
        "coobservation": set.coobservation_counts(),
        "unconstrained_pairs": identifiability(&set).unconstrained_pairs,
        "seed": a.seed,
        "seconds": elapsed,
        "stage_seconds": timings.iter().map(|(k, v)| (k.to_string(), json!(v))).collect::<serde_json::Map<_, _>>(),
        "schemes": rows,
        "distances": {"schemes": labels, "matrix": distances},
        "target": target.name(),
        "unit": a.unit.as_deref().map(super::display_unit),
        "covariance_unit": super::covariance_unit(a.unit.as_deref()),
        "provenance": provenance,
        "ranks": ranks,
        "simulated_dropout": dropout.as_ref().map(|d| json!({
            "channels": d.channels, "left_out": d.left_out, "complete_trials": d.complete_trials,
            "trials_per_repeat": d.trials_per_repeat, "repeats": d.repeats,
            "scores": d.scores.iter().map(spread_json).collect::<Vec<_>>(),
        })),
        "held_out_fit": fit.as_ref().map(|f| json!({
            "folds": f.folds, "criterion": f.criterion, "scores": f.scores.iter().map(spread_json).collect::<Vec<_>>(),
            "other_criterion": f.other_criterion, "other_scores": f.other_scores.iter().map(spread_json).collect::<Vec<_>>(),
        })),
        "decoding": dec.as_ref().map(|d| json!({
            "folds": d.folds, "classes": d.classes, "chance": d.chance,
            "scores": d.scores.iter().map(spread_json).collect::<Vec<_>>(),
        })),
        "recommendation": rec,
        "contributions": contrib,
    });
    files.push((
        a.out.join("compare.json"),
        serde_json::to_string_pretty(&summary)
            .expect("JSON")
            .into_bytes(),
    ));
    if let Some(path) = &a.html {
        let epochs = match &a.epochs {
            Some(e) => {
                let doc = super::report::read_json(e)?;
                let observed: Vec<Vec<usize>> =
                    set.trials().iter().map(|t| t.observed.clone()).collect();
                lacuna::report::epochs_check::check_epochs_match(
                    &doc,
                    set.channels(),
                    set.len(),
                    Some(&observed),
                )
                .map_err(|why| LacunaError::Format {
                    path: e.clone(),
                    message: format!("does not describe this trial set: {why}; pass the epochs.json written with these covariances"),
                })?;
                Some(doc)
            }
            None => None,
        };
        files.push((
            path.clone(),
            lacuna::report::html::render(&summary, epochs.as_ref()).into_bytes(),
        ));
    }
    lacuna::output::write_outputs(Some(&a.out), files)?;
    if a.json {
        println!("{}", serde_json::to_string_pretty(&summary).expect("JSON"));
    } else if !a.quiet {
        println!(
            "{} trials × {p} channels, {} schemes, {elapsed:.1} s",
            set.len(),
            candidates.len()
        );
        println!(
            "{:<26} {:>9} {:>6} {:>11} {:>10}",
            "scheme", "converged", "iter", "dispersion", "seconds"
        );
        for (k, c) in candidates.iter().enumerate() {
            match &results[k].0 {
                Ok(m) => println!(
                    "{:<26} {:>9} {:>6} {:>11.4} {:>10.3}",
                    c.label,
                    m.diagnostics.converged,
                    m.diagnostics.iterations,
                    dispersions[k],
                    results[k].1
                ),
                Err(e) => println!("{:<26} not applicable: {e}", c.label),
            }
        }
        if let Some(r) = &rec {
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
        println!("wrote {}", a.out.display());
    }
    Ok(0)
}

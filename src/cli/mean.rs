//! `lacuna mean`: one scheme, one trial set, one mean.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Instant;

use clap::Args;
use lacuna::diagnose::{identifiability, summarize};
use lacuna::report::json::MeanReport;
use lacuna::schemes::InitRule;
use lacuna::solve::StopRule;
use lacuna::trials::io::load_trial_set;
use lacuna::{LacunaError, Result, SchemeOptions, scheme_by_name};

#[derive(Args, Debug)]
#[command(
    after_help = "`--help` (not -h) also defines the figures the report gives.",
    after_long_help = lacuna::report::glossary::help_text(lacuna::report::glossary::MEAN)
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
    /// unobserved channels may be NaN (then --mask may be omitted).
    #[arg(long, value_name = "STACK.npy")]
    covs: PathBuf,
    /// Observation mask: NPY uint8/bool (N, p) or CSV with a header of channel
    /// names and one 0/1 row per trial (1 = observed).
    #[arg(long, value_name = "MASK")]
    mask: Option<PathBuf>,
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
    #[arg(long, value_name = "FILE")]
    weights: Option<PathBuf>,
    /// Stop when the relative Riemannian gradient norm is at or below this.
    #[arg(long, default_value_t = 1e-10)]
    tol: f64,
    /// Give up after this many iterations (the mean is still written; exit 4).
    #[arg(long, default_value_t = 500)]
    max_iter: usize,
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
    #[arg(long, default_value_t = 1e-2)]
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
    /// Electrode positions for --scheme spherical-spline: CSV `channel,x,y,z`.
    #[arg(long, value_name = "FILE.csv")]
    positions: Option<PathBuf>,
    /// Leave out channels that no trial observed instead of refusing.
    #[arg(long)]
    drop_unobserved: bool,
    /// Print nothing on stderr except errors.
    #[arg(long)]
    quiet: bool,
    /// Print the JSON report on stdout as well.
    #[arg(long)]
    json: bool,
}

pub fn run(a: MeanArgs) -> Result<i32> {
    let scheme = scheme_by_name(&a.scheme).ok_or_else(|| {
        let names: Vec<&str> = lacuna::all_schemes().iter().map(|s| s.name()).collect();
        let hint = lacuna::schemes::closest_scheme_name(&a.scheme)
            .map(|n| format!(" (did you mean '{n}'?)"))
            .unwrap_or_default();
        LacunaError::InvalidOption(format!(
            "unknown scheme '{}'{hint}; choose one of: {}",
            a.scheme,
            names.join(", ")
        ))
    })?;
    let init = InitRule::from_name(&a.init).ok_or_else(|| {
        LacunaError::InvalidOption(format!(
            "unknown --init '{}'; choose available-case, diagonal or scaled-identity",
            a.init
        ))
    })?;
    use super::ranges::{float_in, int_in};
    float_in("--tol", a.tol, 1e-300, 0.1)?;
    int_in("--max-iter", a.max_iter, 1, 1_000_000)?;
    int_in("--starts", a.starts, 1, 1000)?;
    float_in("--loading", a.loading, 1e-300, 1e6)?;
    float_in("--shrinkage", a.shrinkage, 1e-300, 1.0)?;
    if let Some(t) = a.samples {
        int_in("--samples", t, 2, 1_000_000_000)?;
    }
    if let Some(r) = a.rank {
        int_in("--rank", r, 1, 100_000)?;
    }
    {
        let mut inputs: Vec<(&str, &std::path::Path)> = vec![("--covs", &a.covs)];
        for (o, p) in [
            ("--mask", &a.mask),
            ("--weights", &a.weights),
            ("--positions", &a.positions),
        ] {
            if let Some(p) = p {
                inputs.push((o, p));
            }
        }
        let mut outputs: Vec<(&str, &std::path::Path)> = vec![("--out", &a.out)];
        if let Some(r) = &a.report {
            outputs.push(("--report", r));
        }
        lacuna::output::check_paths(&inputs, &outputs, &[])?;
    }
    let started = Instant::now();
    // The stack is read block by block, then worked on: peak resident memory
    // measured at 1.5× the file (20 000 trials × 32 channels: 238 MB for a
    // 156 MB stack); 2× leaves a margin.
    if let Ok(m) = std::fs::metadata(&a.covs) {
        lacuna::limits::check_fits("lacuna mean", 2 * m.len(), rayon::current_num_threads())?;
    }
    let mut set = load_trial_set(&a.covs, a.mask.as_deref(), a.weights.as_deref())?;
    set = super::apply_channel_names(set, a.channels.as_deref(), a.mask.as_deref())?;
    let mut dropped = Vec::new();
    let mut ident = identifiability(&set);
    if a.drop_unobserved && !ident.never_observed.is_empty() {
        dropped = ident
            .never_observed
            .iter()
            .map(|&c| set.channels()[c].clone())
            .collect();
        set = set.without_channels(&ident.never_observed)?;
        ident = identifiability(&set);
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
    let options = SchemeOptions {
        stop: StopRule {
            tol: a.tol,
            max_iter: a.max_iter,
        },
        init,
        starts: a.starts,
        seed: a.seed,
        observer,
        loading: a.loading,
        shrinkage: a.shrinkage,
        samples: a.samples,
        rank: a.rank,
        positions: match &a.positions {
            Some(path) => Some(Arc::new(super::positions_by_name(
                lacuna::trials::io::read_positions(path, set.channels())?,
                set.channels(),
            ))),
            None => None,
        },
        warm_start: None,
        scale_correction: if a.correct_scale {
            Some(super::degrees_of_freedom(a.samples, a.effective_samples)?)
        } else {
            None
        },
        regularize: match &a.regularize {
            Some(spec) => Some(
                lacuna::schemes::regularize::Regularizer::parse(spec, a.samples)
                    .map_err(|e| LacunaError::InvalidOption(format!("--regularize {e}")))?,
            ),
            None => None,
        },
    };
    let result = scheme.average(&set, &options)?;
    if show_progress {
        eprintln!();
    }
    let elapsed = started.elapsed().as_secs_f64();
    let mean_bytes = lacuna::trials::io::encode_matrix(&a.out, &result.published(), set.channels());
    let summary = summarize(&set, &result.mean);
    let report = MeanReport::new(
        &result,
        &ident,
        &summary,
        set.channels(),
        set.len(),
        dropped.clone(),
        elapsed,
        rayon::current_num_threads(),
    );
    let ranks = lacuna::diagnose::rank_table(&set, a.samples);
    let mut report = report;
    report.ranks = Some(&ranks);
    let mut input_paths: Vec<&std::path::Path> = vec![&a.covs];
    for p in [&a.mask, &a.weights, &a.positions].into_iter().flatten() {
        input_paths.push(p);
    }
    report.provenance = Some(lacuna::report::provenance::provenance(&input_paths)?);
    report.unit = a.unit.as_deref().map(super::display_unit);
    report.covariance_unit = super::covariance_unit(a.unit.as_deref());
    report.regularizer = options.regularize;
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
    if !a.quiet {
        let incomplete = (0..set.len()).filter(|&i| !set.is_complete(i)).count();
        eprintln!(
            "lacuna mean: {} trials ({incomplete} incomplete), {} channels, scheme {}",
            set.len(),
            set.n_channels(),
            result.scheme
        );
        if let Some(line) = ranks.summary_line() {
            eprintln!(
                "  {line}{}",
                match options.regularize {
                    Some(r) => format!("; regularised first by {}", r.label()),
                    None => String::new(),
                }
            );
        }
        if !dropped.is_empty() {
            eprintln!(
                "  dropped channels observed in no trial: {}",
                dropped.join(", ")
            );
        }
        if d.iterative {
            eprintln!(
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
            eprintln!("  note: {n}");
        }
        eprintln!(
            "  condition number {:.3e}, log det {:.4}; wrote {}",
            summary.condition_number,
            summary.log_det_mean,
            a.out.display()
        );
    }
    if !d.converged {
        for line in report.advice {
            eprintln!("warning: {line}");
        }
        return Ok(4);
    }
    Ok(0)
}

//! `lacuna recentre`: whiten every trial by its session's mean, masks kept.

use std::io::IsTerminal;
use std::path::PathBuf;

use clap::Args;
use lacuna::Result;
use lacuna::jobs::{MeanJob, RecentreJob};
use lacuna::trials::io::load_trial_set;

const EXAMPLE: &str = "Example (after `lacuna extract … --out trials`):
  lacuna recentre --covs trials/covs.npy --mask trials/mask.csv --labels trials/labels.csv --out centred
  lacuna mean --covs centred/covs.npy --mask centred/mask.csv --labels centred/labels.csv --by label --out means

Each session (the `session` column of --labels; all trials when there is
none) is averaged with the masked mean, and each trial's observed block C
becomes M^{-1/2} C M^{-1/2} with M that mean's matching sub-block. Sessions
recorded on different days, caps or dropouts then share one centre and can
be pooled. See docs/sessions.md.";

#[derive(Args, Debug)]
#[command(after_help = EXAMPLE)]
pub struct RecentreArgs {
    /// Covariance stack: NPY float64 (N, p, p), NaN where unobserved.
    #[arg(long, value_name = "STACK.npy")]
    covs: PathBuf,
    /// Observation mask: NPY (N, p) or CSV with a header of channel names.
    #[arg(long, value_name = "MASK")]
    mask: Option<PathBuf>,
    /// Channel names for a stack without a CSV mask: comma-separated, or a file.
    #[arg(long, value_name = "NAMES|FILE")]
    channels: Option<String>,
    /// Trial labels CSV (`label`, `session` columns): sessions are re-centred
    /// separately; the labels are copied to the output.
    #[arg(long, value_name = "LABELS.csv")]
    labels: Option<PathBuf>,
    /// Trial weights within each session's mean: NPY (N,) or one-column CSV.
    #[arg(long, value_name = "FILE")]
    weights: Option<PathBuf>,
    /// Output folder: covs.npy (NaN where unobserved), mask.csv, labels.csv
    /// (when --labels was given) and recentre.json.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Scheme for the session means (`lacuna schemes`).
    #[arg(long, default_value = "airm-observed", value_name = "NAME")]
    scheme: String,
    /// Stopping tolerance of the session means.
    #[arg(long, default_value = "1e-10", value_name = "TOL")]
    tol: f64,
    /// Leave channels a whole session never observed out of its mean
    /// (its trials do not observe them either) instead of refusing.
    #[arg(long)]
    drop_unobserved: bool,
    /// Print no summary.
    #[arg(long)]
    quiet: bool,
    /// Print recentre.json on stdout as well.
    #[arg(long)]
    json: bool,
}

pub fn run(a: RecentreArgs) -> Result<i32> {
    let job = RecentreJob {
        mean: MeanJob {
            scheme: a.scheme.clone(),
            tol: a.tol,
            drop_unobserved: a.drop_unobserved,
            ..MeanJob::default()
        },
    };
    job.mean.options(None)?;
    let mut inputs: Vec<(&str, &std::path::Path)> = vec![("--covs", &a.covs)];
    for (o, p) in [
        ("--mask", &a.mask),
        ("--labels", &a.labels),
        ("--weights", &a.weights),
    ] {
        if let Some(p) = p {
            inputs.push((o, p));
        }
    }
    lacuna::output::check_paths(&inputs, &[], &[("--out", &a.out)])?;
    if let Ok(m) = std::fs::metadata(&a.covs) {
        // The input set, the re-centred copy, and the output bytes.
        lacuna::limits::check_fits("lacuna recentre", 3 * m.len(), rayon::current_num_threads())?;
    }
    let set = load_trial_set(&a.covs, a.mask.as_deref(), a.weights.as_deref())?;
    let mut set = super::apply_channel_names(set, a.channels.as_deref(), a.mask.as_deref())?;
    if let Some(path) = &a.labels {
        let (l, s) = lacuna::trials::io::read_labels(path, set.len())?;
        set.labels = Some(l);
        set.sessions = s;
    }
    if !a.quiet && std::io::stderr().is_terminal() {
        eprintln!("  averaging each session, then re-centring its trials …");
    }
    let out = job.run(&set)?;
    let mut files: Vec<(PathBuf, Vec<u8>)> = vec![
        (
            a.out.join("covs.npy"),
            lacuna::trials::io::encode_stack_with_nan(&out.set),
        ),
        (
            a.out.join("mask.csv"),
            lacuna::trials::io::encode_mask_csv(&out.set),
        ),
    ];
    if let Some(labels) = &out.set.labels {
        let rows = (0..out.set.len()).map(|i| {
            let mut r = vec![labels[i].clone()];
            if let Some(s) = &out.set.sessions {
                r.push(s[i].clone());
            }
            r
        });
        let header: &[&str] = if out.set.sessions.is_some() {
            &["label", "session"]
        } else {
            &["label"]
        };
        files.push((
            a.out.join("labels.csv"),
            lacuna::report::tables::table(header, rows),
        ));
    }
    let mut input_paths: Vec<&std::path::Path> = vec![&a.covs];
    for p in [&a.mask, &a.labels, &a.weights].into_iter().flatten() {
        input_paths.push(p);
    }
    let record = serde_json::json!({
        "recentre_version": "1",
        "lacuna_version": env!("CARGO_PKG_VERSION"),
        "caution": lacuna::jobs::comparison::CAUTION,
        "scheme": a.scheme,
        "channels": out.set.channels(),
        "sessions": out.sessions,
        "provenance": lacuna::report::provenance::provenance(&input_paths)?,
    });
    let json = serde_json::to_string_pretty(&record).unwrap_or_default();
    files.push((a.out.join("recentre.json"), json.as_bytes().to_vec()));
    lacuna::output::write_outputs(Some(&a.out), files)?;
    if a.json {
        println!("{json}");
    }
    if !a.quiet && !a.json {
        println!(
            "lacuna recentre: {} trials, {} channels, {} session(s), centres by {}",
            out.set.len(),
            out.set.n_channels(),
            out.sessions.len(),
            a.scheme
        );
        for s in &out.sessions {
            println!(
                "  {:<20} {:>6} trials  mean {} ({} iterations)  re-centred mean at distance {:.2e} from the identity{}",
                s.session,
                s.trials,
                if s.converged {
                    "converged"
                } else {
                    "NOT converged"
                },
                s.iterations,
                s.residual,
                if s.left_out.is_empty() {
                    String::new()
                } else {
                    format!("; never observed here: {}", s.left_out.join(", "))
                }
            );
        }
        println!("  wrote {}", a.out.display());
    }
    if !out.converged() {
        for s in out.sessions.iter().filter(|s| !s.converged) {
            eprintln!(
                "warning: the mean of session '{}' did not converge; its trials are re-centred on an unconverged centre",
                s.session
            );
        }
        return Ok(4);
    }
    Ok(0)
}

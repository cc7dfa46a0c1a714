//! `lacuna merge`: pool trial-set folders recorded with different electrode
//! lists into one set over the union of their channels.

use std::path::PathBuf;

use clap::Args;
use lacuna::Result;
use lacuna::trials::io::load_trial_set;

const EXAMPLE: &str = "Example (two studies, one with a 24- and one with a 32-electrode cap):
  lacuna extract cap24/*.edf … --out trials-a
  lacuna extract cap32/*.bdf … --out trials-b
  lacuna merge trials-a trials-b --out pooled
  lacuna mean --covs pooled/covs.npy --mask pooled/mask.csv --labels pooled/labels.csv --by session --drop-unobserved --out means

Each folder holds covs.npy, mask.csv (its header names the channels) and,
optionally, labels.csv — what `extract` and `recentre` write. Channels are
matched by name; a channel a folder lacks is unobserved in all its trials.
Trials without a session get their folder's name as session.";

#[derive(Args, Debug)]
#[command(after_help = EXAMPLE)]
pub struct MergeArgs {
    /// Trial-set folders (covs.npy, mask.csv, optional labels.csv), two or more.
    #[arg(required = true, num_args = 2.., value_name = "DIR")]
    sets: Vec<PathBuf>,
    /// Output folder: covs.npy, mask.csv, labels.csv, merge.json.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Print no summary.
    #[arg(long)]
    quiet: bool,
}

pub fn run(a: MergeArgs) -> Result<i32> {
    // The same folder twice would count its trials twice.
    let mut seen: Vec<PathBuf> = Vec::new();
    for dir in &a.sets {
        let key = std::fs::canonicalize(dir).unwrap_or_else(|_| dir.clone());
        if seen.contains(&key) {
            return Err(lacuna::LacunaError::InvalidOption(format!(
                "{} is given twice: each trial set may be merged once",
                dir.display()
            )));
        }
        seen.push(key);
    }
    let mut files: Vec<(String, PathBuf)> = Vec::new();
    for dir in &a.sets {
        for f in ["covs.npy", "mask.csv", "labels.csv"] {
            let p = dir.join(f);
            if f != "labels.csv" || p.exists() {
                files.push((format!("{} ({f})", dir.display()), p));
            }
        }
    }
    let inputs: Vec<(&str, &std::path::Path)> = files
        .iter()
        .map(|(n, p)| (n.as_str(), p.as_path()))
        .collect();
    lacuna::output::check_paths(&inputs, &[], &[("--out", &a.out)])?;
    let mut sets = Vec::new();
    for dir in &a.sets {
        let mut s = load_trial_set(&dir.join("covs.npy"), Some(&dir.join("mask.csv")), None)?;
        let labels = dir.join("labels.csv");
        if labels.exists() {
            let (l, ss) = lacuna::trials::io::read_labels(&labels, s.len())?;
            s.labels = Some(l);
            s.sessions = ss;
        }
        let name = dir
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| dir.display().to_string());
        sets.push((name, s));
    }
    let merged = lacuna::trials::merge::merge_by_name(&sets)?;
    let record = lacuna::trials::merge::MergeRecord::of(&sets, &merged);
    let names = merged.channels();
    let never_together = &record.pairs_never_observed_together;
    let mut out: Vec<(PathBuf, Vec<u8>)> = vec![
        (
            a.out.join("covs.npy"),
            lacuna::trials::io::encode_stack_with_nan(&merged),
        ),
        (
            a.out.join("mask.csv"),
            lacuna::trials::io::encode_mask_csv(&merged),
        ),
        (
            a.out.join("merge.json"),
            serde_json::to_string_pretty(&record)
                .unwrap_or_default()
                .into_bytes(),
        ),
    ];
    let sessions = merged.sessions.clone().unwrap_or_default();
    let rows = (0..merged.len()).map(|i| {
        vec![
            merged
                .labels
                .as_ref()
                .map_or(String::new(), |l| l[i].clone()),
            sessions[i].clone(),
        ]
    });
    out.push((
        a.out.join("labels.csv"),
        lacuna::report::tables::table(&["label", "session"], rows),
    ));
    lacuna::output::write_outputs(Some(&a.out), out)?;
    if !a.quiet {
        println!(
            "lacuna merge: {} sets, {} trials, {} channels in the union",
            sets.len(),
            merged.len(),
            names.len()
        );
        for (n, s) in &sets {
            let missing: Vec<&String> =
                names.iter().filter(|c| !s.channels().contains(c)).collect();
            println!(
                "  {n}: {} trials, {} channels{}",
                s.len(),
                s.channels().len(),
                if missing.is_empty() {
                    String::new()
                } else {
                    format!(
                        "; lacks {} (unobserved in all its trials)",
                        missing
                            .iter()
                            .map(|c| c.as_str())
                            .collect::<Vec<_>>()
                            .join(", ")
                    )
                }
            );
        }
        if never_together.is_empty() {
            println!("  every pair of channels is observed together in some trial");
        } else {
            println!(
                "  {} pair(s) of channels are never observed together (a channel only one set has, against one only another has): the masked mean keeps them at the maximum-determinant completion — their covariance is not estimated from data. {}",
                never_together.len(),
                never_together
                    .iter()
                    .take(10)
                    .cloned()
                    .collect::<Vec<_>>()
                    .join(", ")
                    + if never_together.len() > 10 {
                        ", …"
                    } else {
                        ""
                    }
            );
        }
        println!("  wrote {}", a.out.display());
    }
    Ok(0)
}

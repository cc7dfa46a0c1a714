//! `lacuna synth`: simulated data with known truth, for trying things out.

use std::path::{Path, PathBuf};

use clap::{Args, ValueEnum};
use lacuna::simulate::headset::{HeadsetParams, simulate};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::trials::TrialSet;
use lacuna::trials::io::{encode_mask, encode_stack_with_nan, write_matrix};
use lacuna::trials::npy::write_atomic;
use lacuna::{LacunaError, Result};

#[derive(Clone, Copy, Debug, ValueEnum)]
enum Scenario {
    /// A 24-electrode dry headset, 3 sessions, two conditions, realistic dropout runs.
    Headset,
    /// One random population covariance, uniform random dropout (sizes set by flags).
    Uniform,
}

#[derive(Args, Debug)]
pub struct SynthArgs {
    /// Output folder (created if absent). Writes covs.npy (NaN where
    /// unobserved), mask.npy, mask.csv (with channel names), and the truth:
    /// truth.npy (uniform), or for headset covs-complete.npy (the trials before
    /// dropout), truth-rest.npy, truth-task.npy and labels.csv.
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Which simulated study to write.
    #[arg(long, value_enum, default_value = "headset")]
    scenario: Scenario,
    /// Number of trials (uniform scenario).
    #[arg(long, default_value_t = 200)]
    trials: usize,
    /// Number of channels (uniform scenario).
    #[arg(long, default_value_t = 16)]
    channels: usize,
    /// Samples per trial: how noisy each trial's covariance is.
    #[arg(long, default_value_t = 256)]
    samples: usize,
    /// Fraction of trials that lose channels (uniform scenario).
    #[arg(long, default_value_t = 0.3)]
    dropout: f64,
    /// Most channels a trial can lose (uniform scenario).
    #[arg(long, default_value_t = 4)]
    max_lost: usize,
    /// Condition number of the population covariance (uniform scenario).
    #[arg(long, default_value_t = 100.0)]
    condition: f64,
    /// Random seed; the same seed gives the same files.
    #[arg(long, default_value_t = 2026)]
    seed: u64,
}

fn mask_csv(set: &TrialSet) -> Vec<u8> {
    let mut s = set.channels().join(",");
    s.push('\n');
    let p = set.n_channels();
    for row in set.mask().chunks(p) {
        s.push_str(
            &row.iter()
                .map(|&b| if b { "1" } else { "0" })
                .collect::<Vec<_>>()
                .join(","),
        );
        s.push('\n');
    }
    s.into_bytes()
}

fn write_set(dir: &Path, set: &TrialSet) -> Result<()> {
    write_atomic(&dir.join("covs.npy"), &encode_stack_with_nan(set))?;
    write_atomic(&dir.join("mask.npy"), &encode_mask(set))?;
    write_atomic(&dir.join("mask.csv"), &mask_csv(set))
}

pub fn run(a: SynthArgs) -> Result<i32> {
    if a.channels < 2
        || a.trials == 0
        || a.samples == 0
        || !(0.0..=1.0).contains(&a.dropout)
        || a.max_lost == 0
        || !(a.condition >= 1.0)
    {
        return Err(LacunaError::InvalidOption("need --channels ≥ 2, --trials ≥ 1, --samples ≥ 1, --dropout in [0, 1], --max-lost ≥ 1, --condition ≥ 1".into()));
    }
    std::fs::create_dir_all(&a.out).map_err(|source| LacunaError::Write {
        path: a.out.clone(),
        source,
    })?;
    match a.scenario {
        Scenario::Headset => {
            let study = simulate(&HeadsetParams {
                samples: a.samples,
                seed: a.seed,
                ..HeadsetParams::default()
            });
            write_set(&a.out, &study.trials)?;
            let mut labels = String::from("label,session\n");
            for (l, s) in study.labels.iter().zip(&study.sessions) {
                labels.push_str(&format!("{l},{s}\n"));
            }
            write_atomic(&a.out.join("labels.csv"), labels.as_bytes())?;
            // The same trials before any electrode was lost: the complete-data
            // reference, and input for the full-data schemes.
            let complete =
                TrialSet::from_full(study.trials.channels().to_vec(), study.full.clone(), None)?;
            write_atomic(
                &a.out.join("covs-complete.npy"),
                &encode_stack_with_nan(&complete),
            )?;
            write_matrix(
                &a.out.join("truth-rest.npy"),
                &study.truth[0],
                study.trials.channels(),
            )?;
            write_matrix(
                &a.out.join("truth-task.npy"),
                &study.truth[1],
                study.trials.channels(),
            )?;
            let cells = study.trials.mask().iter().filter(|&&m| !m).count();
            let total = study.trials.len() * study.trials.n_channels();
            eprintln!(
                "wrote the headset study ({} trials × {} channels, {:.1}% of trial-channel cells lost) to {}",
                study.trials.len(),
                study.trials.n_channels(),
                100.0 * cells as f64 / total as f64,
                a.out.display()
            );
        }
        Scenario::Uniform => {
            let mut rng = Rng::new(a.seed);
            let truth = random_spd(a.channels, a.condition, &mut rng);
            let full: Vec<_> = (0..a.trials)
                .map(|_| sample_covariance(&truth, a.samples, &mut rng))
                .collect();
            let set = masked_set(
                &full,
                random_dropout(a.trials, a.channels, a.dropout, a.max_lost, &mut rng),
            );
            write_set(&a.out, &set)?;
            write_matrix(&a.out.join("truth.npy"), &truth, set.channels())?;
            eprintln!(
                "wrote {} trials × {} channels to {}",
                a.trials,
                a.channels,
                a.out.display()
            );
        }
    }
    Ok(0)
}

//! `lacuna synth`: a synthetic trial set with known truth, for trying things out.

use std::path::PathBuf;

use clap::Args;
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::trials::io::{encode_mask, encode_stack_with_nan, write_matrix};
use lacuna::trials::npy::write_atomic;
use lacuna::{LacunaError, Result};

#[derive(Args, Debug)]
pub struct SynthArgs {
    /// Output folder (created if absent): covs.npy (NaN where unobserved),
    /// mask.npy, truth.npy (population covariance).
    #[arg(long, value_name = "DIR")]
    out: PathBuf,
    /// Number of trials.
    #[arg(long, default_value_t = 200)]
    trials: usize,
    /// Number of channels.
    #[arg(long, default_value_t = 16)]
    channels: usize,
    /// Samples per trial (sets how noisy each trial's covariance is).
    #[arg(long, default_value_t = 256)]
    samples: usize,
    /// Fraction of trials that lose channels.
    #[arg(long, default_value_t = 0.3)]
    dropout: f64,
    /// Most channels a trial can lose.
    #[arg(long, default_value_t = 4)]
    max_lost: usize,
    /// Condition number of the population covariance.
    #[arg(long, default_value_t = 100.0)]
    condition: f64,
    /// Random seed; the same seed gives the same files.
    #[arg(long, default_value_t = 1)]
    seed: u64,
}

pub fn run(a: SynthArgs) -> Result<i32> {
    if a.channels < 2 || a.trials == 0 || a.samples == 0 || !(0.0..=1.0).contains(&a.dropout) || a.max_lost == 0 || !(a.condition >= 1.0) {
        return Err(LacunaError::InvalidOption("need --channels ≥ 2, --trials ≥ 1, --samples ≥ 1, --dropout in [0, 1], --max-lost ≥ 1, --condition ≥ 1".into()));
    }
    let mut rng = Rng::new(a.seed);
    let truth = random_spd(a.channels, a.condition, &mut rng);
    let full: Vec<_> = (0..a.trials).map(|_| sample_covariance(&truth, a.samples, &mut rng)).collect();
    let observed = random_dropout(a.trials, a.channels, a.dropout, a.max_lost, &mut rng);
    let set = masked_set(&full, observed);
    std::fs::create_dir_all(&a.out).map_err(|source| LacunaError::Write { path: a.out.clone(), source })?;
    write_atomic(&a.out.join("covs.npy"), &encode_stack_with_nan(&set))?;
    write_atomic(&a.out.join("mask.npy"), &encode_mask(&set))?;
    write_matrix(&a.out.join("truth.npy"), &truth, set.channels())?;
    eprintln!("wrote {} trials × {} channels to {}", a.trials, a.channels, a.out.display());
    Ok(0)
}

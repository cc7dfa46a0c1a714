//! `lacuna synth`: simulated data with known truth, for trying things out.

use lacuna::report::tables;
use std::path::{Path, PathBuf};

use clap::{Args, ValueEnum};
use lacuna::ingest::edf::{EdfVariant, EdfWriteSpec, write_edf};
use lacuna::ingest::text::encode_events_csv;
use lacuna::output::write_atomic;
use lacuna::simulate::headset::{HeadsetParams, simulate};
use lacuna::simulate::recording::{RecordingParams, simulate_recording};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::trials::TrialSet;
use lacuna::trials::io::{encode_mask, encode_mask_csv, encode_stack_with_nan, write_matrix};
use lacuna::trials::npy::encode_f64;
use lacuna::{LacunaError, Result};

#[derive(Clone, Copy, Debug, ValueEnum)]
enum Scenario {
    /// A 24-electrode dry headset, 3 sessions, two conditions, realistic dropout runs.
    Headset,
    /// One random population covariance, uniform random dropout (sizes set by flags).
    Uniform,
    /// The headset study as raw recordings (EDF+/BDF+ per session, or NPY
    /// epochs) with electrode faults and the ground truth; input for `lacuna extract`.
    Recording,
}

#[derive(Clone, Copy, Debug, ValueEnum, PartialEq)]
enum RecordingFormat {
    /// EDF+ (16-bit) with annotations, plus an events CSV per session.
    Edf,
    /// BDF+ (24-bit) with annotations, plus an events CSV per session.
    Bdf,
    /// NPY epochs (N, p, T) float64; lost samples are NaN.
    Npy,
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
    /// Number of trials (uniform: 200; recording: 30 per session); 1–100000.
    #[arg(long)]
    trials: Option<usize>,
    /// Number of channels (uniform: 16; recording: 24); 2–256.
    #[arg(long)]
    channels: Option<usize>,
    /// Sessions (recording scenario); 1–100.
    #[arg(long, default_value_t = 3)]
    sessions: usize,
    /// Sampling rate in Hz (recording scenario); 64–5000.
    #[arg(long, default_value_t = 256)]
    rate: usize,
    /// File format of the recording scenario.
    #[arg(long, value_enum, default_value = "edf")]
    format: RecordingFormat,
    /// Samples per trial: how noisy each trial's covariance is; more than
    /// the channel count, at most 1e6.
    #[arg(long, default_value_t = 256)]
    samples: usize,
    /// Fraction of trials that lose channels (uniform scenario); 0–1.
    #[arg(long, default_value_t = 0.3)]
    dropout: f64,
    /// Most channels a trial can lose (uniform scenario); 1 to channels − 1.
    #[arg(long, default_value_t = 4)]
    max_lost: usize,
    /// Condition number of the population covariance (uniform scenario); 1–1e8.
    #[arg(long, default_value_t = 100.0)]
    condition: f64,
    /// Random seed; the same seed gives the same files.
    #[arg(long, default_value_t = 2026)]
    seed: u64,
}

fn write_set(dir: &Path, set: &TrialSet) -> Result<()> {
    write_atomic(&dir.join("covs.npy"), &encode_stack_with_nan(set))?;
    write_atomic(&dir.join("mask.npy"), &encode_mask(set))?;
    write_atomic(&dir.join("mask.csv"), &encode_mask_csv(set))
}

pub fn run(a: SynthArgs) -> Result<i32> {
    let (default_trials, default_channels) = match a.scenario {
        Scenario::Recording => (30, 24),
        _ => (200, 16),
    };
    let trials = a.trials.unwrap_or(default_trials);
    let channels = a.channels.unwrap_or(default_channels);
    // One documented range per option (see --help); the covariance-level
    // scenarios need more samples than channels for SPD trial covariances.
    use lacuna::error::{float_in, int_in};
    int_in("channels", channels, (2, 256))?;
    int_in("trials", trials, (1, 100_000))?;
    int_in("sessions", a.sessions, (1, 100))?;
    int_in("rate", a.rate, (64, 5000))?;
    int_in("samples", a.samples, (channels + 1, 1_000_000))?;
    float_in("dropout", a.dropout, (0.0, 1.0))?;
    int_in("max_lost", a.max_lost, (1, channels - 1))?;
    float_in("condition", a.condition, (1.0, 1e8))?;
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
            let labels = tables::table(
                &["label", "session"],
                study
                    .labels
                    .iter()
                    .zip(&study.sessions)
                    .map(|(l, s)| vec![l.to_string(), s.to_string()]),
            );
            write_atomic(&a.out.join("labels.csv"), &labels)?;
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
            let truth = random_spd(channels, a.condition, &mut rng);
            let full: Vec<_> = (0..trials)
                .map(|_| sample_covariance(&truth, a.samples, &mut rng))
                .collect();
            let set = masked_set(
                &full,
                random_dropout(trials, channels, a.dropout, a.max_lost, &mut rng),
            );
            write_set(&a.out, &set)?;
            write_matrix(&a.out.join("truth.npy"), &truth, set.channels())?;
            eprintln!(
                "wrote {} trials × {} channels to {}",
                trials,
                channels,
                a.out.display()
            );
        }
        Scenario::Recording => write_recording(&a, trials, channels)?,
    }
    Ok(0)
}

fn write_recording(a: &SynthArgs, trials: usize, channels: usize) -> Result<()> {
    let params = RecordingParams {
        channels,
        rate: a.rate,
        sessions: a.sessions,
        trials_per_session: trials,
        nan_faults: a.format == RecordingFormat::Npy,
        seed: a.seed,
        ..RecordingParams::default()
    };
    let study = simulate_recording(&params)?;
    let p = study.channels.len();
    match a.format {
        RecordingFormat::Edf | RecordingFormat::Bdf => {
            let (variant, ext) = if a.format == RecordingFormat::Edf {
                (EdfVariant::EdfPlus, "edf")
            } else {
                (EdfVariant::BdfPlus, "bdf")
            };
            for (k, session) in study.sessions.iter().enumerate() {
                let spec = EdfWriteSpec {
                    variant,
                    channel_names: &study.channels,
                    unit: "uV",
                    physical_range: (-params.range_uv, params.range_uv),
                    sampling_rate: params.rate,
                    record_seconds: 1,
                    patient: "X X X X",
                    recording: &format!("Startdate X X simulated-headset session-{}", k + 1),
                    events: &session.events,
                };
                write_edf(
                    &a.out.join(format!("session-{}.{ext}", k + 1)),
                    &spec,
                    &session.signals,
                )?;
                write_atomic(
                    &a.out.join(format!("events-{}.csv", k + 1)),
                    &encode_events_csv(&session.events),
                )?;
            }
        }
        RecordingFormat::Npy => {
            let len = (params.epoch_length * params.rate as f64).round() as usize;
            let mut data = Vec::new();
            for session in &study.sessions {
                for e in &session.events {
                    let start =
                        ((e.onset + params.epoch_offset) * params.rate as f64).round() as usize;
                    for sig in &session.signals {
                        data.extend_from_slice(&sig[start..start + len]);
                    }
                }
            }
            let n = data.len() / (p * len);
            write_atomic(&a.out.join("epochs.npy"), &encode_f64(&[n, p, len], &data))?;
        }
    }
    let session = |i: usize| format!("session-{}", i / trials + 1);
    let labels = tables::table(
        &["label", "session"],
        study
            .labels
            .iter()
            .enumerate()
            .map(|(i, l)| vec![l.to_string(), session(i)]),
    );
    let mut fault_rows = Vec::new();
    for (i, row) in study.faults.iter().enumerate() {
        for (c, f) in row.iter().enumerate() {
            if let Some(f) = f {
                fault_rows.push(vec![
                    i.to_string(),
                    session(i),
                    study.channels[c].clone(),
                    f.name().to_string(),
                ]);
            }
        }
    }
    let faults = tables::table(&["trial", "session", "channel", "fault"], fault_rows);
    let observed: Vec<bool> = study.faults.iter().flatten().map(Option::is_none).collect();
    let mask = tables::mask(&study.channels, &observed);
    let positions = tables::table(
        &["channel", "x", "y", "z"],
        study
            .channels
            .iter()
            .zip(&study.positions)
            .map(|(name, q)| {
                vec![
                    name.clone(),
                    format!("{:.6}", q[0]),
                    format!("{:.6}", q[1]),
                    format!("{:.6}", q[2]),
                ]
            }),
    );
    write_atomic(&a.out.join("truth-labels.csv"), &labels)?;
    write_atomic(&a.out.join("truth-faults.csv"), &faults)?;
    write_atomic(&a.out.join("truth-mask.csv"), &mask)?;
    write_atomic(&a.out.join("positions.csv"), &positions)?;
    write_matrix(
        &a.out.join("truth-rest.npy"),
        &study.truth[0],
        &study.channels,
    )?;
    write_matrix(
        &a.out.join("truth-task.npy"),
        &study.truth[1],
        &study.channels,
    )?;
    let lost = study.true_mask().iter().filter(|m| !**m).count();
    eprintln!(
        "wrote the headset recordings ({} sessions × {} trials, {} channels at {} Hz, {:.1}% of trial-channel cells faulty) to {}",
        a.sessions,
        trials,
        p,
        a.rate,
        100.0 * lost as f64 / (study.faults.len() * p) as f64,
        a.out.display()
    );
    Ok(())
}

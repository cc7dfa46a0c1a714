//! The demo scenario at the signal level: a dry-electrode headset study.
//!
//! A study of our own invention: a 24-electrode dry headset, 3 sessions,
//! cued trials of two conditions ("rest" and "task"). Signals are EEG-like:
//! a 1/f background (sums of first-order autoregressive processes with
//! corner frequencies 0.5–32 Hz), narrow-band oscillatory sources (alpha
//! around 10 Hz, beta around 20 Hz) whose power the task changes, mixed to
//! the electrodes through a fixed, spatially smooth random forward matrix
//! (Gaussian fall-off with distance on a unit hemisphere), activity common
//! to all electrodes through the reference, plus white sensor noise. Electrodes fail the way dry electrodes do: runs of
//! consecutive trials lost (flat, railed at the amplifier limit, or
//! disconnected), one electrode poor for a whole session (broadband noise),
//! and occasional single-trial pops. Dry caps lose far more channels than
//! gel caps (about 16% versus 3% of channels excluded on average in
//! Fiedler et al. 2022, Hum. Brain Mapp.); the defaults give roughly 10%
//! of trial-channel cells.
//!
//! Faults fade in and out over 0.35 s inside the gaps between epochs, so
//! the ground-truth mask (a fault overlaps the epoch window) is exact.
//! The ground-truth population covariance of each condition is computed
//! from the sources' spectra and the analysis band-pass (|H|⁴ for
//! forward–backward filtering), by numerical integration.

use super::rng::Rng;
use crate::Mat;
use crate::ingest::Event;
use crate::ingest::filter::{Band, Sos, butterworth};

/// What went wrong with an electrode in a trial.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fault {
    Flat,
    Railed,
    Disconnected,
    NoisySession,
    Pop,
    /// Samples lost (NaN); only when `nan_faults` is set (NPY/CSV output).
    Lost,
}

impl Fault {
    pub fn name(self) -> &'static str {
        match self {
            Fault::Flat => "flat",
            Fault::Railed => "railed",
            Fault::Disconnected => "disconnected",
            Fault::NoisySession => "noisy-session",
            Fault::Pop => "pop",
            Fault::Lost => "lost",
        }
    }
}

/// How fault runs meet the clean data around them.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FaultLayout {
    /// Runs of 2–8 trials that start and end in the gaps between epochs,
    /// with 0.35 s raised-cosine fades: the default study.
    InGaps,
    /// Runs of 1–4 trials that start and end exactly at epoch boundaries
    /// with no fade, plus one-epoch flat runs on otherwise clean channels.
    /// With back-to-back epochs (trial interval = epoch length, offset 0) a
    /// fault's step sits right against the clean epoch next to it: the case
    /// where filtering across epochs used to leak a fault into a neighbour.
    AtEpochEdges,
}

/// Parameters of the scenario.
#[derive(Debug, Clone)]
pub struct RecordingParams {
    pub channels: usize,
    pub rate: usize,
    pub sessions: usize,
    pub trials_per_session: usize,
    /// Seconds between cues.
    pub trial_interval: f64,
    /// Epoch window relative to the cue (the truth mask refers to it).
    pub epoch_offset: f64,
    pub epoch_length: f64,
    /// Seconds of recording before the first cue and after the last trial.
    pub lead: f64,
    /// Multiplies the rates of dropout runs and pops.
    pub dropout_scale: f64,
    /// Some lost runs are NaN samples instead of flat lines.
    pub nan_faults: bool,
    /// Where fault runs sit relative to the epochs.
    pub fault_layout: FaultLayout,
    /// Analysis band for the ground-truth covariance.
    pub band: Option<(f64, f64)>,
    pub band_order: usize,
    /// Amplifier range (µV): values beyond are clipped, as a real amplifier rails.
    pub range_uv: f64,
    pub seed: u64,
}

impl Default for RecordingParams {
    fn default() -> Self {
        RecordingParams {
            channels: 24,
            rate: 256,
            sessions: 3,
            trials_per_session: 30,
            trial_interval: 3.0,
            epoch_offset: 0.5,
            epoch_length: 2.0,
            lead: 3.0,
            dropout_scale: 1.0,
            nan_faults: false,
            fault_layout: FaultLayout::InGaps,
            band: Some((8.0, 30.0)),
            band_order: 4,
            range_uv: 500.0,
            seed: 2026,
        }
    }
}

/// One simulated session.
pub struct SimulatedSession {
    /// `signals[c]` in µV.
    pub signals: Vec<Vec<f64>>,
    pub events: Vec<Event>,
}

/// The study: sessions, truth.
pub struct SimulatedStudy {
    pub channels: Vec<String>,
    /// Electrode positions on the unit sphere (x, y, z): the standard 10-10
    /// places of the channel names.
    pub positions: Vec<[f64; 3]>,
    pub sessions: Vec<SimulatedSession>,
    /// Faults per trial (all sessions in order) and channel.
    pub faults: Vec<Vec<Option<Fault>>>,
    /// Condition per trial.
    pub labels: Vec<String>,
    /// Population covariance of the band-passed signals, [rest, task].
    pub truth: [Mat; 2],
}

impl SimulatedStudy {
    /// The sessions as in-memory recordings, epoched at the scenario's
    /// epoch window around each cue (no file round trip), with the
    /// amplifier range as the rails.
    pub fn session_inputs(
        &self,
        params: &RecordingParams,
    ) -> crate::Result<Vec<crate::ingest::pipeline::SessionInput>> {
        use crate::ingest::epochs::{Windowing, plan_epochs};
        self.sessions
            .iter()
            .enumerate()
            .map(|(s, session)| {
                let source = crate::ingest::InMemorySource {
                    name: format!("simulated session {}", s + 1),
                    channels: self.channels.clone(),
                    rate: params.rate as f64,
                    data: std::sync::Arc::new(session.signals.clone()),
                    rails: Some(vec![
                        (-params.range_uv, params.range_uv);
                        self.channels.len()
                    ]),
                };
                let epochs = plan_epochs(
                    &source,
                    &Windowing::Events {
                        events: session.events.clone(),
                        offset: params.epoch_offset,
                        length: params.epoch_length,
                        keep: vec![],
                    },
                )?;
                Ok(crate::ingest::pipeline::SessionInput {
                    session: format!("session-{}", s + 1),
                    source: Box::new(source),
                    epochs,
                    isolated: false,
                })
            })
            .collect()
    }

    /// True mask (trials × channels, true = observed).
    pub fn true_mask(&self) -> Vec<bool> {
        self.faults
            .iter()
            .flat_map(|f| f.iter().map(Option::is_none))
            .collect()
    }
}

/// Channel names: the 10-10 names of the demo headset when they suffice.
pub fn channel_names(p: usize) -> Vec<String> {
    if p <= super::headset::CHANNELS.len() {
        super::headset::CHANNELS[..p]
            .iter()
            .map(|s| s.to_string())
            .collect()
    } else {
        (1..=p).map(|c| format!("E{c:02}")).collect()
    }
}

/// A first-order autoregressive process x[t] = a·x[t−1] + e[t].
fn ar1_power(a: f64, w: f64) -> f64 {
    1.0 / (1.0 - 2.0 * a * w.cos() + a * a)
}

struct Source {
    /// Spatial pattern over electrodes.
    pattern: Vec<f64>,
    kind: SourceKind,
    /// Standard deviation (µV) at rest.
    amplitude: f64,
    /// Amplitude factor during "task".
    task_gain: f64,
}

enum SourceKind {
    Oscillatory(Sos),
    /// Sum of AR(1) processes (coefficient, weight).
    Pink(Vec<(f64, f64)>),
}

const PINK_CORNERS: [f64; 4] = [0.5, 2.0, 8.0, 32.0];

fn source_spectrum(kind: &SourceKind, f: f64, fs: f64) -> f64 {
    match kind {
        SourceKind::Oscillatory(sos) => sos.response(f, fs).powi(2),
        SourceKind::Pink(parts) => {
            let w = 2.0 * std::f64::consts::PI * f / fs;
            parts.iter().map(|(a, g)| g * g * ar1_power(*a, w)).sum()
        }
    }
}

/// Simulates the study.
pub fn simulate_recording(params: &RecordingParams) -> crate::Result<SimulatedStudy> {
    let p = params.channels;
    let fs = params.rate as f64;
    let mut rng = Rng::new(params.seed);
    // Electrodes at their standard 10-10 places (src/electrodes.rs); caps
    // larger than the demo headset's names spread over the upper hemisphere
    // on a Fibonacci spiral.
    let names = channel_names(p);
    let positions: Vec<[f64; 3]> =
        crate::electrodes::standard_positions(&names, crate::electrodes::System::TenTen)
            .unwrap_or_else(|_| {
                let golden = std::f64::consts::PI * (3.0 - 5f64.sqrt());
                (0..p)
                    .map(|i| {
                        let z = 1.0 - (i as f64 + 0.5) / p as f64 * 0.9;
                        let r = (1.0 - z * z).sqrt();
                        let phi = i as f64 * golden;
                        [r * phi.cos(), r * phi.sin(), z]
                    })
                    .collect()
            });
    let random_pattern = |rng: &mut Rng, width: f64| -> Vec<f64> {
        let (x, y) = (rng.normal(), rng.normal());
        let z = rng.normal().abs() + 0.2;
        let n = (x * x + y * y + z * z).sqrt();
        let s = [0.7 * x / n, 0.7 * y / n, 0.7 * z / n];
        let scale = 0.6 + 0.8 * rng.uniform();
        positions
            .iter()
            .map(|e| {
                let d2: f64 = (0..3).map(|k| (e[k] - s[k]).powi(2)).sum();
                scale * (-d2 / (2.0 * width * width)).exp()
            })
            .collect()
    };
    let mut sources = Vec::new();
    for (f0, amp, gain) in [
        (10.0, 7.0, 0.45),
        (10.5, 5.0, 0.6),
        (20.0, 3.0, 1.7),
        (11.5, 4.0, 1.0),
    ] {
        let sos = butterworth(2, Band::Bandpass(f0 - 1.5, f0 + 1.5), fs)?;
        sources.push(Source {
            pattern: random_pattern(&mut rng, 0.45),
            kind: SourceKind::Oscillatory(sos),
            amplitude: amp,
            task_gain: gain,
        });
    }
    for _ in 0..12 {
        let parts = PINK_CORNERS
            .iter()
            .map(|fc| {
                (
                    (-2.0 * std::f64::consts::PI * fc / fs).exp(),
                    1.0 / fc.sqrt(),
                )
            })
            .collect();
        sources.push(Source {
            pattern: random_pattern(&mut rng, 0.6),
            kind: SourceKind::Pink(parts),
            amplitude: 6.0,
            task_gain: 1.0,
        });
    }
    // Activity shared through the reference electrode: nearly uniform over
    // the head, so no electrode is left with only sensor noise.
    sources.push(Source {
        pattern: (0..p).map(|_| 0.7 + 0.3 * rng.uniform()).collect(),
        kind: SourceKind::Pink(
            PINK_CORNERS
                .iter()
                .map(|fc| {
                    (
                        (-2.0 * std::f64::consts::PI * fc / fs).exp(),
                        1.0 / fc.sqrt(),
                    )
                })
                .collect(),
        ),
        amplitude: 5.0,
        task_gain: 1.0,
    });
    let sensor_noise = 1.5;
    // Variance of each source per unit innovation, and its in-band fraction.
    let grid = 8192;
    let band = match params.band {
        Some((lo, hi)) => Some(butterworth(params.band_order, Band::Bandpass(lo, hi), fs)?),
        None => None,
    };
    let band_gain = |f: f64| band.as_ref().map_or(1.0, |b| b.response(f, fs).powi(4));
    let mut unit_var = Vec::new();
    let mut in_band = Vec::new();
    for s in &sources {
        let (mut v, mut vb) = (0.0, 0.0);
        for g in 0..grid {
            let f = (g as f64 + 0.5) / grid as f64 * fs / 2.0;
            let sp = source_spectrum(&s.kind, f, fs);
            v += sp;
            vb += sp * band_gain(f);
        }
        unit_var.push(v / grid as f64);
        in_band.push(vb / v);
    }
    let white_in_band = (0..grid)
        .map(|g| band_gain((g as f64 + 0.5) / grid as f64 * fs / 2.0))
        .sum::<f64>()
        / grid as f64;
    let truth_for = |task: bool| {
        let mut m = Mat::identity(p, p) * (sensor_noise * sensor_noise * white_in_band);
        for (k, s) in sources.iter().enumerate() {
            let a = s.amplitude * if task { s.task_gain } else { 1.0 };
            let power = a * a * in_band[k];
            for i in 0..p {
                for j in 0..p {
                    m[(i, j)] += power * s.pattern[i] * s.pattern[j];
                }
            }
        }
        crate::spd::symmetrize(&m)
    };
    let truth = [truth_for(false), truth_for(true)];

    let n_trials = params.trials_per_session;
    let duration = 2.0 * params.lead + n_trials as f64 * params.trial_interval;
    let n = (duration * fs).round() as usize;
    let warmup = (5.0 * fs) as usize;
    let mut out_sessions = Vec::new();
    let mut faults = Vec::new();
    let mut labels = Vec::new();
    for session in 0..params.sessions {
        // Balanced, shuffled conditions.
        let mut cond: Vec<bool> = (0..n_trials).map(|t| t % 2 == 1).collect();
        for i in (1..cond.len()).rev() {
            let j = rng.below(i + 1);
            cond.swap(i, j);
        }
        let cues: Vec<f64> = (0..n_trials)
            .map(|t| params.lead + t as f64 * params.trial_interval)
            .collect();
        // Condition gain of each sample (applied to the sources).
        let mut task_at = vec![false; n];
        for (t, &c) in cond.iter().enumerate() {
            let a = (cues[t] * fs) as usize;
            let b = (((cues[t] + params.trial_interval) * fs) as usize).min(n);
            task_at[a..b].iter_mut().for_each(|v| *v = c);
        }
        let mut signals = vec![vec![0.0; n]; p];
        for (k, s) in sources.iter().enumerate() {
            let mut x: Vec<f64> = (0..n + warmup).map(|_| rng.normal()).collect();
            match &s.kind {
                SourceKind::Oscillatory(sos) => sos.filter_causal(&mut x),
                SourceKind::Pink(parts) => {
                    // Independent innovations per AR(1) part (the first part
                    // uses the draws already in x), as the spectrum assumes.
                    let mut sum = vec![0.0; x.len()];
                    for (j, (a, g)) in parts.iter().enumerate() {
                        let mut state = 0.0;
                        for (i, acc) in sum.iter_mut().enumerate() {
                            let e = if j == 0 { x[i] } else { rng.normal() };
                            state = a * state + e;
                            *acc += g * state;
                        }
                    }
                    x = sum;
                }
            }
            let scale = s.amplitude / unit_var[k].sqrt();
            for (i, v) in x[warmup..].iter().enumerate() {
                let a = scale * v * if task_at[i] { s.task_gain } else { 1.0 };
                for (sig, w) in signals.iter_mut().zip(&s.pattern) {
                    sig[i] += w * a;
                }
            }
        }
        for sig in signals.iter_mut() {
            for v in sig.iter_mut() {
                *v += sensor_noise * rng.normal();
            }
        }
        // Faults.
        let mut cell: Vec<Vec<Option<Fault>>> = vec![vec![None; p]; n_trials];
        let poor = (session == 1).then(|| rng.below(p));
        for c in 0..p {
            let mut t = 0;
            while t < n_trials {
                let edges = params.fault_layout == FaultLayout::AtEpochEdges;
                if edges && rng.uniform() < 0.01 * params.dropout_scale {
                    cell[t][c] = Some(Fault::Flat);
                    t += 2;
                    continue;
                }
                if rng.uniform() < 0.02 * params.dropout_scale {
                    let len = if edges {
                        1 + rng.below(4)
                    } else {
                        2 + rng.below(7)
                    };
                    let kind = match rng.below(3) {
                        0 if params.nan_faults => Fault::Lost,
                        0 => Fault::Flat,
                        1 => Fault::Railed,
                        _ => Fault::Disconnected,
                    };
                    for row in cell.iter_mut().skip(t).take(len) {
                        row[c] = Some(kind);
                    }
                    t += len + 1;
                    continue;
                }
                if rng.uniform() < 0.004 * params.dropout_scale {
                    cell[t][c] = Some(Fault::Pop);
                }
                t += 1;
            }
            if poor == Some(c) {
                for row in cell.iter_mut() {
                    row[c] = Some(row[c].unwrap_or(Fault::NoisySession));
                }
            }
        }
        for (c, sig) in signals.iter_mut().enumerate() {
            apply_faults(sig, &cell, c, &cues, params, &mut rng);
            for v in sig.iter_mut() {
                if v.is_finite() {
                    *v = v.clamp(-params.range_uv, params.range_uv);
                }
            }
        }
        let events = cond
            .iter()
            .zip(&cues)
            .map(|(&c, &t)| Event {
                onset: t,
                duration: params.epoch_offset + params.epoch_length,
                label: if c { "task" } else { "rest" }.to_string(),
            })
            .collect();
        labels.extend(
            cond.iter()
                .map(|&c| if c { "task" } else { "rest" }.to_string()),
        );
        faults.extend(cell);
        out_sessions.push(SimulatedSession { signals, events });
    }
    Ok(SimulatedStudy {
        channels: channel_names(p),
        positions,
        sessions: out_sessions,
        faults,
        labels,
        truth,
    })
}

/// Writes the faults of channel `c` into its signal: each run of equal
/// faults is one stretch from 0.1 s after its first cue to 0.1 s before the
/// next trial, with 0.35 s raised-cosine fades (inside the gaps between epochs).
fn apply_faults(
    x: &mut [f64],
    cell: &[Vec<Option<Fault>>],
    c: usize,
    cues: &[f64],
    params: &RecordingParams,
    rng: &mut Rng,
) {
    let fs = params.rate as f64;
    let n = x.len();
    let mut t = 0;
    while t < cell.len() {
        let Some(kind) = cell[t][c] else {
            t += 1;
            continue;
        };
        let mut end = t + 1;
        while end < cell.len() && cell[end][c] == Some(kind) {
            end += 1;
        }
        let (a, b, fade) = match params.fault_layout {
            FaultLayout::InGaps => (
                ((cues[t] + 0.1) * fs) as usize,
                (((cues[end - 1] + params.trial_interval - 0.1) * fs) as usize).min(n),
                (0.35 * fs) as usize,
            ),
            // Exactly the epochs' samples (the same rounding as plan_epochs).
            FaultLayout::AtEpochEdges => {
                let start = ((cues[t] + params.epoch_offset) * fs).round() as usize;
                let last = ((cues[end - 1] + params.epoch_offset) * fs).round() as usize;
                let len = (params.epoch_length * fs).round() as usize;
                (start, (last + len).min(n), 0)
            }
        };
        let weight = |i: usize| -> f64 {
            let k = i - a;
            let from_end = b - 1 - i;
            let edge = k.min(from_end);
            if edge >= fade {
                1.0
            } else {
                0.5 - 0.5 * (std::f64::consts::PI * edge as f64 / fade as f64).cos()
            }
        };
        let mut drift = 0.0;
        for (i, xi) in x.iter_mut().enumerate().take(b).skip(a) {
            let w = weight(i);
            let orig = *xi;
            let faulty = match kind {
                Fault::Flat => 0.02 * rng.normal(),
                Fault::Railed => params.range_uv * 1.5,
                Fault::Disconnected => {
                    drift = 0.999 * drift + 2.0 * rng.normal();
                    drift + 25.0 * rng.normal()
                }
                Fault::NoisySession => orig + 20.0 * rng.normal(),
                Fault::Pop => orig + 60.0 * rng.normal(),
                Fault::Lost => f64::NAN,
            };
            *xi = if kind == Fault::Lost {
                // Samples are lost outright in the fully faulty stretch.
                if w >= 1.0 { f64::NAN } else { orig }
            } else {
                (1.0 - w) * orig + w * faulty
            };
        }
        t = end;
    }
}

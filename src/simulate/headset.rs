//! The demo scenario: a dry-electrode headset study, simulated at the level
//! of trial covariances (signal-level simulation arrives with ingest).
//!
//! 24 electrodes named by the 10-10 convention, 3 sessions, two task
//! conditions that change the power of two of eight latent sources mixed
//! through a fixed random forward matrix, plus sensor noise. Dropouts follow
//! what dry electrodes do: runs of consecutive trials with an electrode lost,
//! one electrode poor for a whole session, and occasional single-trial bursts.
//! Dry caps lose far more channels than gel caps (about 16% versus 3% of
//! channels excluded on average in Fiedler et al. 2022, Hum. Brain Mapp.);
//! the default rates below give roughly 10% of trial-channel cells.

use super::rng::Rng;
use super::stacks::{gaussian, sample_covariance};
use crate::spd::{Mat, symmetrize};
use crate::trials::{Trial, TrialSet};

/// Electrode names of the demo headset.
pub const CHANNELS: [&str; 24] = [
    "Fp1", "Fp2", "F7", "F3", "Fz", "F4", "F8", "FC5", "FC1", "FC2", "FC6", "T7", "C3", "Cz", "C4",
    "T8", "CP5", "CP1", "CP2", "CP6", "P3", "Pz", "P4", "Oz",
];

/// Ground truth and data of one simulated study.
pub struct HeadsetStudy {
    /// The trial set (observed blocks only).
    pub trials: TrialSet,
    /// Condition label per trial ("rest" or "task").
    pub labels: Vec<String>,
    /// Session id per trial.
    pub sessions: Vec<String>,
    /// Population covariance per condition, `[rest, task]`.
    pub truth: [Mat; 2],
    /// The full (unmasked) trial covariances, for validation.
    pub full: Vec<Mat>,
}

/// Parameters of the scenario.
#[derive(Debug, Clone)]
pub struct HeadsetParams {
    /// Sessions.
    pub sessions: usize,
    /// Trials per session.
    pub trials_per_session: usize,
    /// Samples per trial.
    pub samples: usize,
    /// Per-trial probability that an electrode starts a dropout run.
    pub run_start: f64,
    /// Seed.
    pub seed: u64,
}

impl Default for HeadsetParams {
    fn default() -> Self {
        HeadsetParams {
            sessions: 3,
            trials_per_session: 80,
            samples: 250,
            run_start: 0.012,
            seed: 2026,
        }
    }
}

/// Simulates the study.
pub fn simulate(params: &HeadsetParams) -> HeadsetStudy {
    let mut rng = Rng::new(params.seed);
    let p = CHANNELS.len();
    let sources = 8;
    let forward = gaussian(p, sources, &mut rng);
    let base_power: Vec<f64> = (0..sources).map(|k| 4.0 / (1.0 + k as f64)).collect();
    let population = |task: bool| {
        let mut power = base_power.clone();
        if task {
            power[1] *= 0.4; // desynchronisation in one source
            power[4] *= 2.0; // increase in another
        }
        let d = Mat::from_diagonal(&nalgebra::DVector::from_vec(power));
        symmetrize(&(&forward * d * forward.transpose() + Mat::identity(p, p) * 0.3))
    };
    let truth = [population(false), population(true)];
    let n = params.sessions * params.trials_per_session;
    let mut full = Vec::with_capacity(n);
    let mut labels = Vec::with_capacity(n);
    let mut sessions = Vec::with_capacity(n);
    let mut lost = vec![vec![false; p]; n];
    for s in 0..params.sessions {
        // One electrode poor for the whole of session 2.
        let poor = if s == 1 { Some(rng.below(p)) } else { None };
        let mut run_left = vec![0usize; p];
        for t in 0..params.trials_per_session {
            let i = s * params.trials_per_session + t;
            let task = t % 2 == 1;
            labels.push(if task { "task" } else { "rest" }.to_string());
            sessions.push(format!("session-{}", s + 1));
            full.push(sample_covariance(
                &truth[task as usize],
                params.samples,
                &mut rng,
            ));
            for c in 0..p {
                if run_left[c] == 0 && rng.uniform() < params.run_start {
                    run_left[c] = 3 + rng.below(13);
                }
                let burst = rng.uniform() < 0.004;
                lost[i][c] = run_left[c] > 0 || burst || poor == Some(c);
                run_left[c] = run_left[c].saturating_sub(1);
            }
            // Never lose every channel of a trial.
            if lost[i].iter().all(|&l| l) {
                lost[i][0] = false;
            }
        }
    }
    let trials = full
        .iter()
        .zip(&lost)
        .map(|(m, l)| {
            let o: Vec<usize> = (0..p).filter(|&c| !l[c]).collect();
            Trial {
                block: crate::spd::sub_block(m, &o),
                observed: o,
            }
        })
        .collect();
    let channels = CHANNELS.iter().map(|s| s.to_string()).collect();
    let mut set = TrialSet::new(channels, trials, None, "simulated headset")
        .expect("simulated trials are valid");
    set.labels = Some(labels.clone());
    set.sessions = Some(sessions.clone());
    HeadsetStudy {
        trials: set,
        labels,
        sessions,
        truth,
        full,
    }
}

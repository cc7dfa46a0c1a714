//! Read-only summaries of a mean against its trial set: per-channel coverage,
//! conditioning and the log-determinant ("swelling") check.
//!
//! Swelling: the full-data Karcher mean satisfies `log det G = Σ ŵ_i log det C_i`
//! (Ando, Li, Mathias 2004), while the arithmetic mean inflates the
//! determinant. We report `log det` of the mean beside the weighted mean of the
//! trials' `log det` over complete trials, and, per observation pattern, the
//! same comparison on the mean's matching sub-block.

use crate::spd::{Mat, condition_number, log_det};
use crate::trials::TrialSet;

/// Coverage of one channel.
#[derive(Debug, Clone, serde::Serialize)]
pub struct ChannelCoverage {
    /// Channel name.
    pub channel: String,
    /// Trials in which it was observed.
    pub trials_observed: usize,
    /// Share of the total weight carried by those trials.
    pub weight_share: f64,
}

/// Log-determinant comparison on one observation pattern.
#[derive(Debug, Clone, serde::Serialize)]
pub struct PatternSwelling {
    /// Observed channel indices of the pattern (0-based).
    pub observed: Vec<usize>,
    /// The same channels by name.
    pub channels: Vec<String>,
    /// Trials with this pattern.
    pub trials: usize,
    /// `log det` of the mean's sub-block on these channels.
    pub log_det_mean_block: f64,
    /// Weighted mean of the trials' `log det` on this pattern.
    pub mean_log_det_trials: f64,
}

/// Everything [`summarize`] reports.
#[derive(Debug, Clone, serde::Serialize)]
pub struct MeanSummary {
    /// Per-channel coverage.
    pub coverage: Vec<ChannelCoverage>,
    /// 2-norm condition number of the mean.
    pub condition_number: f64,
    /// `log det` of the mean.
    pub log_det_mean: f64,
    /// Weighted mean `log det` of complete trials (None if there are none).
    pub mean_log_det_complete_trials: Option<f64>,
    /// Per-pattern comparison, largest patterns first (at most 50).
    pub patterns: Vec<PatternSwelling>,
}

/// Summarises `mean` against `set`.
pub fn summarize(set: &TrialSet, mean: &Mat) -> MeanSummary {
    let w = set.normalized_weights();
    let coverage = set
        .channels()
        .iter()
        .enumerate()
        .map(|(c, name)| {
            let on: Vec<usize> = (0..set.len()).filter(|&i| set.observed(i, c)).collect();
            ChannelCoverage {
                channel: name.clone(),
                trials_observed: on.len(),
                weight_share: on.iter().map(|&i| w[i]).sum(),
            }
        })
        .collect();
    let mut groups = set.pattern_groups();
    groups.sort_by_key(|g| std::cmp::Reverse(g.trials.len()));
    let trials = set.trials();
    let patterns: Vec<PatternSwelling> = groups
        .iter()
        .take(50)
        .map(|g| {
            let sub = crate::spd::sub_block(mean, &g.observed);
            let ws: f64 = g.trials.iter().map(|&i| w[i]).sum();
            let mld = g
                .trials
                .iter()
                .map(|&i| w[i] * log_det(&trials[i].block).unwrap_or(f64::NAN))
                .sum::<f64>()
                / ws;
            PatternSwelling {
                observed: g.observed.clone(),
                channels: g
                    .observed
                    .iter()
                    .map(|&c| set.channels()[c].clone())
                    .collect(),
                trials: g.trials.len(),
                log_det_mean_block: log_det(&sub).unwrap_or(f64::NAN),
                mean_log_det_trials: mld,
            }
        })
        .collect();
    let complete: Vec<usize> = (0..set.len()).filter(|&i| set.is_complete(i)).collect();
    let mean_log_det_complete_trials = if complete.is_empty() {
        None
    } else {
        let ws: f64 = complete.iter().map(|&i| w[i]).sum();
        Some(
            complete
                .iter()
                .map(|&i| w[i] * log_det(&trials[i].block).unwrap_or(f64::NAN))
                .sum::<f64>()
                / ws,
        )
    };
    MeanSummary {
        coverage,
        condition_number: condition_number(mean),
        log_det_mean: log_det(mean).unwrap_or(f64::NAN),
        mean_log_det_complete_trials,
        patterns,
    }
}

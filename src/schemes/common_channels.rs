//! `common-channels`: the Karcher mean on the channels every trial observed.
//!
//! The usual "drop the channel everywhere" workaround. Channels some trial
//! lost are not estimated: the returned full-size matrix holds, for them,
//! their available-case variance and zero covariance, only so that it stays
//! SPD; `estimated_channels` says which block is the real answer, and every
//! comparison uses that block only.

use super::{AveragingScheme, Karcher, MeanResult, SchemeOptions, pairwise_mean};
use crate::error::{LacunaError, Result};
use crate::spd::Mat;
use crate::trials::TrialSet;

/// Karcher mean over the channels observed in every trial.
pub struct CommonChannels;

impl AveragingScheme for CommonChannels {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::CommonChannels
    }
    fn summary(&self) -> &'static str {
        "Karcher mean on the channels observed in every trial; the others are not estimated"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let p = set.n_channels();
        let counts = set.coobservation_counts();
        let common: Vec<usize> = (0..p).filter(|&c| counts[c][c] == set.len()).collect();
        if common.is_empty() {
            return Err(LacunaError::Unsupported(format!(
                "scheme '{}' needs at least one channel observed in every trial; none of the {p} is",
                self.name()
            )));
        }
        let drop: Vec<usize> = (0..p).filter(|c| !common.contains(c)).collect();
        let sub = set.without_channels(&drop)?;
        let mut r = Karcher.average(&sub, options)?;
        let pair = pairwise_mean(set);
        let mut full = Mat::zeros(p, p);
        for c in 0..p {
            full[(c, c)] = pair[(c, c)];
        }
        for (a, &ca) in common.iter().enumerate() {
            for (b, &cb) in common.iter().enumerate() {
                full[(ca, cb)] = r.mean[(a, b)];
            }
        }
        let mut notes = vec![format!(
            "estimated on the {} of {p} channels observed in every trial; not estimated: {}",
            common.len(),
            if drop.is_empty() {
                "none".to_string()
            } else {
                drop.iter()
                    .map(|&c| set.channels()[c].clone())
                    .collect::<Vec<_>>()
                    .join(", ")
            }
        )];
        notes.append(&mut r.diagnostics.notes);
        r.diagnostics.notes = notes;
        r.diagnostics.estimated_channels = (common.len() < p).then_some(common);
        r.scheme = self.name().into();
        r.mean = full;
        Ok(r)
    }
}

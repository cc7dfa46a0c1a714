//! Pooling trial sets recorded with different electrode lists: the channels
//! are matched by name and the merged set runs over their union. A channel
//! one recording lacks is unobserved in all of its trials — exactly what the
//! masked mean is for. Trial order is kept (first set first), and so are
//! weights, labels and sessions (a set without sessions gets its own name
//! as the session, so the sets stay apart for `--by session`).

use serde::Serialize;

use crate::error::{LacunaError, Result};
use crate::trials::TrialSet;

/// Layout version of the merge record (merge.json).
pub const MERGE_VERSION: &str = "1";

/// What a merge did: the union, each set's part, and the channel pairs no
/// trial of any set observes together (written as merge.json).
#[derive(Debug, Clone, Serialize)]
pub struct MergeRecord {
    pub merge_version: &'static str,
    pub lacuna_version: &'static str,
    pub channels: Vec<String>,
    pub sets: Vec<MergedSet>,
    /// "A–B" for every pair never observed together in the merged set: the
    /// masked mean keeps their covariance at the max-determinant completion.
    pub pairs_never_observed_together: Vec<String>,
}

/// One input set's part of a merge.
#[derive(Debug, Clone, Serialize)]
pub struct MergedSet {
    pub set: String,
    pub trials: usize,
    pub channels: Vec<String>,
    /// Channels of the union this set lacks (unobserved in all its trials).
    pub missing: Vec<String>,
}

impl MergeRecord {
    /// The record of merging `sets` into `merged`.
    pub fn of(sets: &[(String, TrialSet)], merged: &TrialSet) -> Self {
        let names = merged.channels();
        let ident = crate::diagnose::identifiability(merged);
        MergeRecord {
            merge_version: MERGE_VERSION,
            lacuna_version: env!("CARGO_PKG_VERSION"),
            channels: names.to_vec(),
            sets: sets
                .iter()
                .map(|(n, s)| MergedSet {
                    set: n.clone(),
                    trials: s.len(),
                    channels: s.channels().to_vec(),
                    missing: names
                        .iter()
                        .filter(|c| !s.channels().contains(c))
                        .cloned()
                        .collect(),
                })
                .collect(),
            pairs_never_observed_together: ident
                .unconstrained_pairs
                .iter()
                .map(|&[x, y]| format!("{}–{}", names[x], names[y]))
                .collect(),
        }
    }
}

/// Merges `sets` (each with a name for messages and sessions) over the
/// union of their channels, in order of first appearance.
pub fn merge_by_name(sets: &[(String, TrialSet)]) -> Result<TrialSet> {
    if sets.is_empty() {
        return Err(LacunaError::InvalidOption(
            "nothing to merge: give two or more trial sets".into(),
        ));
    }
    let mut channels: Vec<String> = Vec::new();
    for (_, s) in sets {
        for c in s.channels() {
            if !channels.contains(c) {
                channels.push(c.clone());
            }
        }
    }
    let any_labels = sets.iter().any(|(_, s)| s.labels.is_some());
    let mut trials = Vec::new();
    let mut weights = Vec::new();
    let mut labels = Vec::new();
    let mut sessions = Vec::new();
    for (name, s) in sets {
        if any_labels && s.labels.is_none() {
            return Err(LacunaError::MissingSetting {
                setting: "labels".into(),
                needed_for: format!("merging '{name}' with sets that have labels"),
            });
        }
        let at: Vec<usize> = s
            .channels()
            .iter()
            .map(|c| channels.iter().position(|d| d == c).expect("in the union"))
            .collect();
        for (i, t) in s.trials().iter().enumerate() {
            // Observed channels in the union's order, the block permuted to match.
            trials.push(t.remapped(&at));
            weights.push(s.weights()[i]);
            if let Some(l) = &s.labels {
                labels.push(l[i].clone());
            }
            sessions.push(match &s.sessions {
                Some(ss) => ss[i].clone(),
                None => name.clone(),
            });
        }
    }
    let mut out = TrialSet::new(channels, trials, Some(weights), "the merged sets")?;
    out.labels = any_labels.then_some(labels);
    out.sessions = Some(sessions);
    Ok(out)
}

//! Pooling trial sets recorded with different electrode lists: the channels
//! are matched by name and the merged set runs over their union. A channel
//! one recording lacks is unobserved in all of its trials — exactly what the
//! masked mean is for. Trial order is kept (first set first), and so are
//! weights, labels and sessions (a set without sessions gets its own name
//! as the session, so the sets stay apart for `--by session`).

use crate::error::{LacunaError, Result};
use crate::trials::TrialSet;

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

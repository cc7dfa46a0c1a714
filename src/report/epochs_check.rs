//! Does an epochs.json describe this trial set?
//!
//! The dropout raster is drawn from `lacuna extract`'s epochs.json next to a
//! comparison of some trial set. Drawn from another extraction it would show
//! the wrong dropouts without a word, so the two are checked first: same
//! channel names in the same order, as many kept epochs as trials, and —
//! when the trial set's masks are at hand — the same observed channels for
//! every trial.

use crate::jobs::extraction_record::{EpochEntry, ExtractionRecord};

/// Checks `record` (an extraction's epochs.json) against a trial set with
/// these `channels`, `n_trials` trials and, optionally, each trial's
/// observed channel indices. Returns what disagrees, in words.
pub fn check_epochs_match(
    record: &ExtractionRecord,
    channels: &[String],
    n_trials: usize,
    observed: Option<&[Vec<usize>]>,
) -> Result<(), String> {
    check_entries(
        &record.channels,
        &record.epochs,
        channels,
        n_trials,
        observed,
    )
}

fn check_entries(
    names: &[String],
    list: &[EpochEntry],
    channels: &[String],
    n_trials: usize,
    observed: Option<&[Vec<usize>]>,
) -> Result<(), String> {
    if names != channels {
        return Err(format!(
            "its {} channels ({}) are not the trial set's {} ({})",
            names.len(),
            preview(names.iter().map(String::as_str)),
            channels.len(),
            preview(channels.iter().map(String::as_str))
        ));
    }
    // Kept epochs carry the index of the trial they became.
    let kept: Vec<(usize, &EpochEntry)> = list
        .iter()
        .filter_map(|e| e.trial.map(|t| (t, e)))
        .collect();
    if kept.len() != n_trials {
        return Err(format!(
            "it lists {} kept epochs but the trial set has {n_trials} trials",
            kept.len()
        ));
    }
    let mut seen = vec![false; n_trials];
    for &(t, _) in &kept {
        if t >= n_trials || seen[t] {
            return Err(format!("trial index {t} is out of range or repeated"));
        }
        seen[t] = true;
    }
    if let Some(observed) = observed {
        for (t, e) in kept {
            let masked: Vec<&str> = e.masked.iter().map(|m| m.channel.as_str()).collect();
            let expected: Vec<usize> = (0..channels.len())
                .filter(|&c| !masked.contains(&channels[c].as_str()))
                .collect();
            if observed.get(t) != Some(&expected) {
                return Err(format!(
                    "trial {t}: its masked channels ({}) differ from the trial set's mask",
                    if masked.is_empty() {
                        "none".to_string()
                    } else {
                        masked.join(", ")
                    }
                ));
            }
        }
    }
    Ok(())
}

fn preview<'a>(names: impl Iterator<Item = &'a str>) -> String {
    let v: Vec<&str> = names.collect();
    if v.len() <= 6 {
        v.join(", ")
    } else {
        format!("{}, … {}", v[..4].join(", "), v[v.len() - 1])
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::jobs::extraction_record::MaskedEntry;

    fn entry(trial: Option<usize>, masked: &[&str]) -> EpochEntry {
        EpochEntry {
            epoch: 0,
            trial,
            session: "s".into(),
            onset_s: 0.0,
            duration_s: 1.0,
            label: None,
            observed_channels: 2 - masked.len(),
            shrinkage: 0.0,
            rank: 2,
            masked: masked
                .iter()
                .map(|c| MaskedEntry {
                    channel: c.to_string(),
                    reason: "user".into(),
                })
                .collect(),
        }
    }

    // Common practice, no source: each kind of mismatch is caught.
    #[test]
    fn mismatches_are_named() {
        let ch: Vec<String> = vec!["A".into(), "B".into()];
        let list = vec![
            entry(Some(0), &[]),
            entry(None, &["A"]),
            entry(Some(1), &["B"]),
        ];
        let obs = vec![vec![0, 1], vec![0]];
        assert!(check_entries(&ch, &list, &ch, 2, Some(&obs)).is_ok());
        assert!(
            check_entries(&ch, &list, &ch, 3, None)
                .unwrap_err()
                .contains("2 kept")
        );
        let other: Vec<String> = vec!["A".into(), "C".into()];
        assert!(check_entries(&ch, &list, &other, 2, None).is_err());
        let wrong = vec![vec![0, 1], vec![1]];
        assert!(
            check_entries(&ch, &list, &ch, 2, Some(&wrong))
                .unwrap_err()
                .contains("trial 1")
        );
    }
}

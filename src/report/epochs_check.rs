//! Does an epochs.json describe this trial set?
//!
//! The dropout raster is drawn from `lacuna extract`'s epochs.json next to a
//! comparison of some trial set. Drawn from another extraction it would show
//! the wrong dropouts without a word, so the two are checked first: same
//! channel names in the same order, as many kept epochs as trials, and —
//! when the trial set's masks are at hand — the same observed channels for
//! every trial.

use serde_json::Value;

/// Checks `epochs` (an epochs.json document) against a trial set with these
/// `channels`, `n_trials` trials and, optionally, each trial's observed
/// channel indices. Returns what disagrees, in words.
pub fn check_epochs_match(
    epochs: &Value,
    channels: &[String],
    n_trials: usize,
    observed: Option<&[Vec<usize>]>,
) -> Result<(), String> {
    let names: Option<Vec<&str>> = epochs["channels"]
        .as_array()
        .and_then(|a| a.iter().map(Value::as_str).collect());
    let Some(names) = names else {
        return Err("it has no list of channel names".into());
    };
    if names.len() != channels.len() || names.iter().zip(channels).any(|(a, b)| a != b) {
        return Err(format!(
            "its {} channels ({}) are not the trial set's {} ({})",
            names.len(),
            preview(names.iter().copied()),
            channels.len(),
            preview(channels.iter().map(String::as_str))
        ));
    }
    let Some(list) = epochs["epochs"].as_array() else {
        return Err("it has no list of epochs".into());
    };
    // Kept epochs carry the index of the trial they became.
    let mut kept: Vec<(usize, &Value)> = Vec::new();
    for e in list {
        if let Some(t) = e["trial"].as_u64() {
            kept.push((t as usize, e));
        }
    }
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
            let masked: Vec<&str> = e["masked"]
                .as_array()
                .map(|m| m.iter().filter_map(|x| x["channel"].as_str()).collect())
                .unwrap_or_default();
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
    use serde_json::json;

    // Common practice, no source: each kind of mismatch is caught.
    #[test]
    fn mismatches_are_named() {
        let ch: Vec<String> = vec!["A".into(), "B".into()];
        let doc = json!({"channels": ["A", "B"], "epochs": [
            {"trial": 0, "masked": []},
            {"trial": null, "masked": [{"channel": "A"}]},
            {"trial": 1, "masked": [{"channel": "B"}]},
        ]});
        let obs = vec![vec![0, 1], vec![0]];
        assert!(check_epochs_match(&doc, &ch, 2, Some(&obs)).is_ok());
        assert!(
            check_epochs_match(&doc, &ch, 3, None)
                .unwrap_err()
                .contains("2 kept")
        );
        let other: Vec<String> = vec!["A".into(), "C".into()];
        assert!(check_epochs_match(&doc, &other, 2, None).is_err());
        let wrong = vec![vec![0, 1], vec![1]];
        assert!(
            check_epochs_match(&doc, &ch, 2, Some(&wrong))
                .unwrap_err()
                .contains("trial 1")
        );
    }
}

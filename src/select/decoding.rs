//! The decoding check: cross-validated minimum distance to mean with
//! distances on each trial's observed block (Barachant, Bonnet, Congedo &
//! Jutten 2012, IEEE Trans. Biomed. Eng. 59).

use serde::Serialize;

use super::*;
use crate::error::Result;
use crate::trials::TrialSet;

/// Result of [`decoding`]: accuracy per fold (higher is better).
#[derive(Debug, Clone, Serialize)]
pub struct Decoding {
    pub folds: usize,
    pub classes: Vec<String>,
    /// Accuracy of always answering the most frequent class.
    pub chance: f64,
    pub scores: Vec<Score>,
}

/// Cross-validated minimum-distance-to-mean classification, or None when the
/// labels do not allow it (fewer than two classes with two trials each).
pub fn decoding(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<Option<Decoding>> {
    let Some(labels) = &set.labels else {
        return Ok(None);
    };
    let mut classes: Vec<String> = labels.iter().filter(|l| !l.is_empty()).cloned().collect();
    classes.sort();
    classes.dedup();
    let count = |c: &String| labels.iter().filter(|l| *l == c).count();
    if classes.len() < 2 || classes.iter().any(|c| count(c) < 2) {
        return Ok(None);
    }
    let chance = classes.iter().map(count).max().unwrap_or(0) as f64 / labels.len() as f64;
    let fs = folds(set.len(), opts.folds, opts.seed ^ 0xDEC0);
    let unit = |u: usize| -> Vec<std::result::Result<f64, String>> {
        let test = &fs[u];
        candidates
            .iter()
            .map(|c| {
                let mut means = Vec::new();
                for (k, class) in classes.iter().enumerate() {
                    let mut train: Vec<usize> = (0..set.len())
                        .filter(|i| test.binary_search(i).is_err() && &labels[*i] == class)
                        .collect();
                    let cap = (opts.max_train / classes.len()).max(2);
                    seeded_subset(
                        &mut train,
                        cap,
                        opts.seed ^ 0xC1A5 ^ ((k as u64) << 8) ^ test[0] as u64,
                    );
                    let tr = set.select_trials(&train).map_err(|e| e.to_string())?;
                    let m = c.run_loose(&tr).map_err(|e| e.to_string())?;
                    means.push(m);
                }
                let mut right = 0;
                for &i in test {
                    let t = &set.trials()[i];
                    let mut best = (f64::INFINITY, 0);
                    for (k, m) in means.iter().enumerate() {
                        let Some((a, b)) = matching_blocks(
                            &m.mean,
                            m.diagnostics.estimated_channels.as_deref(),
                            t,
                        ) else {
                            continue;
                        };
                        let d = airm_distance(&a, &b);
                        if d < best.0 {
                            best = (d, k);
                        }
                    }
                    right += usize::from(classes[best.1] == labels[i]);
                }
                Ok(right as f64 / test.len().max(1) as f64)
            })
            .collect()
    };
    let per_fold: Vec<Vec<std::result::Result<f64, String>>> =
        map_units(fs.len(), side_by_side(set), |u| {
            let r = unit(u);
            opts.step();
            r
        });
    let scores = candidates
        .iter()
        .enumerate()
        .map(|(k, c)| {
            score_of(
                &c.label,
                per_fold.iter().map(|f| f[k].clone().map(|a| (a, None))),
            )
        })
        .collect();
    Ok(Some(Decoding {
        folds: fs.len(),
        classes,
        chance,
        scores,
    }))
}

#[cfg(test)]
mod tests {
    use super::super::testing;
    use super::*;

    // Common practice, no source: two classes whose covariances differ by
    // factors of 3 to 15 per channel are told apart perfectly by minimum
    // distance to mean; chance is the majority share (1/2 here).
    #[test]
    fn separable_classes_are_decoded() {
        let set = testing::set(40, 5, 3, false);
        let opts = SelectOptions {
            folds: 4,
            ..SelectOptions::default()
        };
        let d = decoding(&set, &testing::candidates(), &opts)
            .unwrap()
            .expect("two classes");
        assert_eq!(d.classes, vec!["a".to_string(), "b".to_string()]);
        assert!((d.chance - 0.5).abs() < 1e-12);
        let masked = &d.scores[0];
        assert_eq!(masked.candidate, "airm-observed");
        assert_eq!(masked.spread.unwrap().median, 1.0);
    }

    // Without labels there is nothing to decode.
    #[test]
    fn no_labels_no_decoding() {
        let mut set = testing::set(12, 3, 4, false);
        set.labels = None;
        let d = decoding(&set, &testing::candidates(), &SelectOptions::default()).unwrap();
        assert!(d.is_none());
    }
}

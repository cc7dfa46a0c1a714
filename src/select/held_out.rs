//! Held-out fit: K-fold over trials; each held-out trial's observed
//! block scored against the training mean's matching sub-block.

use serde::Serialize;

use super::*;
use crate::error::Result;
use crate::spd::Mat;
use crate::trials::TrialSet;

/// Result of [`held_out_fit`]: squared distances of held-out observed blocks
/// to the training mean's sub-blocks (lower is better).
#[derive(Debug, Clone, Serialize)]
pub struct HeldOutFit {
    pub folds: usize,
    /// How each held-out trial was scored.
    pub criterion: FitCriterion,
    /// The other criterion, scored on the same folds (to say when the two
    /// targets would rank differently). Non-finite values (distances to a
    /// rank-deficient block) are left out.
    pub other_criterion: FitCriterion,
    pub other_scores: Vec<Score>,
    pub scores: Vec<Score>,
}

impl FitCriterion {
    /// The criterion of the other target.
    pub fn other(self) -> Self {
        match self {
            FitCriterion::AffineDistance => FitCriterion::Likelihood,
            FitCriterion::Likelihood => FitCriterion::AffineDistance,
        }
    }

    /// In words, for reasons and reports.
    pub fn describe(self) -> &'static str {
        match self {
            FitCriterion::AffineDistance => "median squared affine-invariant distance",
            FitCriterion::Likelihood => {
                "median negative Gaussian log-likelihood per channel, (log det M + tr M⁻¹C)/k"
            }
        }
    }
}

/// One held-out trial's score under `criterion` (lower is better): mean
/// sub-block `m`, trial block `c`.
pub fn fit_score(criterion: FitCriterion, m: &Mat, c: &Mat) -> f64 {
    match criterion {
        FitCriterion::AffineDistance => {
            let d = airm_distance(m, c);
            d * d
        }
        FitCriterion::Likelihood => {
            let k = m.nrows() as f64;
            let Some(l) = crate::spd::kernels::cholesky(m) else {
                return f64::INFINITY;
            };
            let log_det: f64 = 2.0 * (0..m.nrows()).map(|a| l[(a, a)].ln()).sum::<f64>();
            // tr(M⁻¹ C) = ‖L⁻¹ C L⁻ᵀ‖ trace = trace of the whitened block.
            let trace = crate::spd::kernels::whiten(&l, c).trace();
            (log_det + trace) / k
        }
    }
}

/// K-fold held-out fit (see the module documentation).
pub fn held_out_fit(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<HeldOutFit> {
    let fs = folds(set.len(), opts.folds, opts.seed ^ 0xF01D);
    type FoldOutcome = std::result::Result<(Option<usize>, Vec<(f64, f64)>), String>;
    let unit = |u: usize| -> Vec<FoldOutcome> {
        let test = &fs[u];
        let mut train: Vec<usize> = (0..set.len())
            .filter(|i| test.binary_search(i).is_err())
            .collect();
        seeded_subset(&mut train, opts.max_train, opts.seed ^ 0x7EA1 ^ u as u64);
        let Ok(tr) = set.select_trials(&train) else {
            return vec![Err("empty training set".into()); candidates.len()];
        };
        candidates
            .iter()
            .map(|c| {
                let m = c.run_loose(&tr).map_err(|e| e.to_string())?;
                let est = m.diagnostics.estimated_channels.clone();
                Ok((
                    est.as_ref().map(Vec::len),
                    test.iter()
                        .filter_map(|&i| {
                            let (a, b) =
                                matching_blocks(&m.mean, est.as_deref(), &set.trials()[i])?;
                            Some((
                                fit_score(opts.criterion, &a, &b),
                                fit_score(opts.criterion.other(), &a, &b),
                            ))
                        })
                        .collect::<Vec<(f64, f64)>>(),
                ))
            })
            .collect()
    };
    let per_fold: Vec<Vec<FoldOutcome>> = map_units(fs.len(), side_by_side(set), |u| {
        let r = unit(u);
        opts.step();
        r
    });
    let score_with = |pick: fn(&(f64, f64)) -> f64| -> Vec<Score> {
        candidates
            .iter()
            .enumerate()
            .map(|(k, c)| {
                let mut values = Vec::new();
                let mut failures = 0;
                let mut reason = None;
                let mut partial = None;
                for f in &per_fold {
                    match &f[k] {
                        Ok((est, v)) => {
                            values.extend(v.iter().map(pick).filter(|x| x.is_finite()));
                            partial = partial.or(*est);
                        }
                        Err(e) => {
                            failures += 1;
                            reason.get_or_insert(e.clone());
                        }
                    }
                }
                Score {
                    candidate: c.label.clone(),
                    spread: Spread::of(&values),
                    partial,
                    failures,
                    failure_reason: reason,
                }
            })
            .collect()
    };
    let scores = score_with(|v| v.0);
    let other_scores = score_with(|v| v.1);
    Ok(HeldOutFit {
        folds: fs.len(),
        criterion: opts.criterion,
        other_criterion: opts.criterion.other(),
        other_scores,
        scores,
    })
}

#[cfg(test)]
mod tests {
    use super::super::testing;
    use super::*;

    // Common practice, no source: identical trials are fitted exactly by
    // any training mean (held-out distance 0), while noisy trials are not.
    #[test]
    fn exact_data_fit_exactly_noisy_data_do_not() {
        let opts = SelectOptions {
            folds: 3,
            ..SelectOptions::default()
        };
        let exact =
            held_out_fit(&testing::set(30, 4, 2, true), &testing::candidates(), &opts).unwrap();
        let noisy = held_out_fit(
            &testing::set(30, 4, 2, false),
            &testing::candidates(),
            &opts,
        )
        .unwrap();
        for (e, n) in exact.scores.iter().zip(&noisy.scores) {
            let (e, n) = (e.spread.unwrap().median, n.spread.unwrap().median);
            assert!(e < 1e-10, "{e}");
            assert!(n > 1e-3, "{n}");
        }
        assert_eq!(exact.criterion, FitCriterion::AffineDistance);
    }
}

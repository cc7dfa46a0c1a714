//! The contestants: each scheme with the options it runs with — the
//! diagonal-loading grid and, for rank-deficient data, the
//! regularise-then-average grid.

use super::*;
use crate::error::Result;
use crate::trials::TrialSet;

/// One contestant: a scheme and the options it runs with.
pub struct Candidate {
    /// Name in tables (scheme name, with its parameter when there are variants).
    pub label: String,
    /// Which scheme it runs.
    pub id: SchemeId,
    pub scheme: Box<dyn AveragingScheme>,
    pub options: SchemeOptions,
}

impl Candidate {
    /// Runs the candidate on a trial set.
    pub fn run(&self, set: &TrialSet) -> Result<MeanResult> {
        let mut r = self.scheme.average(set, &self.options)?;
        r.scheme = self.label.clone();
        Ok(r)
    }

    /// The same candidate with its solves started from `mean`, its own mean
    /// on the whole set (None: as it was, when it failed there), for the
    /// validation protocols' re-solves on parts of it (folds, dropout
    /// repeats). Only schemes whose solver takes a
    /// start in the set's own coordinates get it (the masked mean and the
    /// Karcher-based complete-trials, diagonal-loading and shrinkage); the
    /// solve still runs to its tolerance, so the start changes the answer by
    /// no more than that tolerance allows (docs/schemes.md).
    pub fn warm_started(&self, mean: Option<&Mat>) -> Candidate {
        let takes_start = matches!(
            self.id,
            SchemeId::AirmObserved
                | SchemeId::CompleteTrials
                | SchemeId::DiagonalLoading
                | SchemeId::Shrinkage
        );
        Candidate {
            label: self.label.clone(),
            id: self.id,
            scheme: self.id.scheme(),
            options: SchemeOptions {
                warm_start: mean
                    .filter(|_| takes_start)
                    .map(|m| std::sync::Arc::new(m.clone())),
                ..self.options.clone()
            },
        }
    }

    /// Runs it inside a validation protocol: iterative schemes stop at a
    /// relative gradient norm of max(tol, 1e-5). The protocols compare
    /// distances of order 1e-2 to 1 whose spread across repeats is of order
    /// 1e-3; the looser stop changes them by about 1e-5 and saves iterations.
    pub(super) fn run_loose(&self, set: &TrialSet) -> Result<MeanResult> {
        let mut options = self.options.clone();
        options.stop.tol = options.stop.tol.max(1e-5);
        let mut r = self.scheme.average(set, &options)?;
        r.scheme = self.label.clone();
        Ok(r)
    }
}

/// Diagonal-loading strengths compared by default.
pub const LOADING_GRID: [f64; 4] = [1e-4, 1e-3, 1e-2, 1e-1];

/// Every scheme that accepts missing channels, diagonal loading once per λ
/// of `loading_grid` (by default [`LOADING_GRID`]). `only` restricts to the given labels or scheme names.
pub fn default_candidates(
    base: &SchemeOptions,
    only: &[String],
    loading_grid: &[f64],
) -> Vec<Candidate> {
    let mut out = Vec::new();
    for s in all_schemes() {
        if !s.handles_missing() {
            continue;
        }
        let id = s.id();
        if only.is_empty() && !id.in_default_comparison() {
            continue;
        }
        // Each scheme stops at its own iteration cap (EM takes many cheap steps).
        let stop = crate::solve::StopRule {
            tol: base.stop.tol,
            max_iter: id.default_max_iter(),
        };
        if id == SchemeId::DiagonalLoading {
            for &l in loading_grid {
                let label = format!("diagonal-loading({l:e})");
                if only.is_empty() || only.iter().any(|o| o == &label || o == s.name()) {
                    out.push(Candidate {
                        label,
                        id,
                        scheme: id.scheme(),
                        options: SchemeOptions {
                            loading: l,
                            observer: None,
                            stop: stop.clone(),
                            ..base.clone()
                        },
                    });
                }
            }
            continue;
        }
        if only.is_empty() || only.iter().any(|o| o == s.name()) {
            out.push(Candidate {
                label: s.name().to_string(),
                id,
                scheme: s,
                options: SchemeOptions {
                    observer: None,
                    stop,
                    ..base.clone()
                },
            });
        }
    }
    out
}

/// Loading strengths and shrinkage intensities of the regularise-then-average
/// grid (relative to each block's mean variance).
pub const REGULARIZE_LOADING: [f64; 3] = [1e-3, 1e-2, 1e-1];
pub const REGULARIZE_SHRINKAGE: [f64; 3] = [0.02, 0.1, 0.3];

/// The masked mean after each regulariser of the grid (plus OAS when the
/// samples per window are known): the candidates for rank-deficient data.
pub fn regularized_candidates(base: &SchemeOptions) -> Vec<Candidate> {
    use crate::schemes::regularize::Regularizer;
    let mut grid: Vec<Regularizer> = REGULARIZE_LOADING
        .iter()
        .map(|&lambda| Regularizer::Loading { lambda })
        .chain(
            REGULARIZE_SHRINKAGE
                .iter()
                .map(|&alpha| Regularizer::Shrinkage { alpha }),
        )
        .collect();
    if let Some(samples) = base.samples.filter(|&t| t >= 2) {
        grid.push(Regularizer::Oas { samples });
    }
    grid.into_iter()
        .map(|r| Candidate {
            label: format!("airm-observed+{}", r.label()),
            id: SchemeId::AirmObserved,
            scheme: SchemeId::AirmObserved.scheme(),
            options: SchemeOptions {
                regularize: Some(r),
                observer: None,
                ..base.clone()
            },
        })
        .collect()
}

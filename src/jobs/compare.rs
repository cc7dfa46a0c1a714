//! The comparison job: every scheme that accepts missing channels on the
//! same trial set, the distances between their means, the selection
//! protocols, the recommendation and the per-channel contributions.
//! `lacuna compare` and the Python package's `lacuna.compare` both run
//! [`CompareJob::run`] and get a typed [`Comparison`]; writing files stays
//! with the caller (see `report::tables` and `report::html`).

use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Instant;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::comparison::{
    CAUTION, COMPARE_VERSION, Comparison, DistanceTable, SchemeMean, SchemeRow, file_stem,
};
use super::{float_in, int_in};
use crate::diagnose::{ContributionOptions, contributions, identifiability, rank_table};
use crate::schemes::{MeanResult, SchemeId};
use crate::select::{
    Candidate, FitCriterion, SelectOptions, Target, decoding, default_candidates, held_out_fit,
    matching_blocks, recommend, regularized_candidates, simulated_dropout,
};
use crate::spd::distance::airm_distance;
use crate::spd::{Mat, condition_number, log_det, sub_block};
use crate::trials::TrialSet;
use crate::{LacunaError, Result, SchemeOptions};

/// Accepted ranges of the numeric settings (inclusive).
pub mod ranges {
    pub const FOLDS: (usize, usize) = (2, 100);
    pub const REPEATS: (usize, usize) = (1, 10_000);
    pub const BOOTSTRAP: (usize, usize) = (0, 10_000);
    /// Fewer trials make the paired leave-one-out difference mostly noise.
    pub const LEAVE_OUT_TRIALS: (usize, usize) = (100, 100_000_000);
}

/// What to compare, with the CLI's defaults (`lacuna compare --help`).
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct CompareJob {
    /// What the mean is for: the Riemannian centre or the population covariance.
    pub target: Target,
    /// Degrees of freedom for the scale-bias-corrected candidate, when not samples − 1.
    pub effective_samples: Option<f64>,
    /// Physical unit of the data (reports give covariances in its square).
    pub unit: Option<String>,
    /// Samples per trial, when known (OAS intensities, the scale correction).
    pub samples: Option<usize>,
    /// Only these schemes (all that accept missing channels when empty).
    pub schemes: Vec<String>,
    /// Electrode positions by channel name (spherical-spline).
    pub positions: Option<BTreeMap<String, [f64; 3]>>,
    pub repeats: usize,
    pub folds: usize,
    pub bootstrap: usize,
    /// Skip the leave-one-channel-out re-solves.
    pub no_leave_out: bool,
    /// Most trials the leave-one-channel-out re-solves use (a seeded
    /// random subset beyond that).
    pub leave_out_trials: usize,
    /// Skip the selection protocols.
    pub no_validation: bool,
    pub seed: u64,
    /// Stopping tolerance of the iterative schemes.
    pub tol: f64,
    /// λ values of the diagonal-loading grid.
    pub loading_grid: Vec<f64>,
    /// α of the shrinkage scheme.
    pub shrinkage: f64,
    /// Leave out channels no trial observed instead of refusing.
    pub drop_unobserved: bool,
}

impl Default for CompareJob {
    fn default() -> Self {
        CompareJob {
            target: Target::Centre,
            effective_samples: None,
            unit: None,
            samples: None,
            schemes: Vec::new(),
            positions: None,
            repeats: 20,
            folds: 5,
            bootstrap: 10,
            no_leave_out: false,
            leave_out_trials: crate::diagnose::contribution::LEAVE_OUT_TRIALS,
            no_validation: false,
            seed: 0,
            tol: 1e-10,
            loading_grid: crate::select::LOADING_GRID.to_vec(),
            shrinkage: 0.1,
            drop_unobserved: false,
        }
    }
}

/// Progress: `(stage, done, total)`, called at the start of each stage
/// (done = 0), after each step, and at its end (done = total).
pub type CompareProgress = Arc<dyn Fn(&str, usize, usize) + Send + Sync>;

impl CompareJob {
    /// Every setting checked before any work; nothing is silently changed.
    pub fn validate(&self) -> Result<()> {
        float_in("tol", self.tol, crate::solve::StopRule::TOL)?;
        float_in("shrinkage", self.shrinkage, crate::schemes::SHRINKAGE_RANGE)?;
        if self.loading_grid.is_empty() || self.loading_grid.len() > 20 {
            return Err(LacunaError::OutOfRange {
                setting: "loading_grid".into(),
                value: format!("{} values", self.loading_grid.len()),
                allowed: "between 1 and 20 values".into(),
            });
        }
        for (k, &l) in self.loading_grid.iter().enumerate() {
            float_in("loading_grid", l, crate::schemes::LOADING_RANGE)?;
            if self.loading_grid[..k].contains(&l) {
                return Err(LacunaError::OutOfRange {
                    setting: "loading_grid".into(),
                    value: format!("{l} twice"),
                    allowed: "distinct values".into(),
                });
            }
        }
        int_in("folds", self.folds, ranges::FOLDS)?;
        int_in("repeats", self.repeats, ranges::REPEATS)?;
        int_in("bootstrap", self.bootstrap, ranges::BOOTSTRAP)?;
        int_in(
            "leave_out_trials",
            self.leave_out_trials,
            ranges::LEAVE_OUT_TRIALS,
        )?;
        if let Some(t) = self.samples {
            int_in("samples", t, super::mean::ranges::SAMPLES)?;
        }
        if let Some(n) = self.effective_samples {
            float_in(
                "effective_samples",
                n,
                super::mean::ranges::EFFECTIVE_SAMPLES,
            )?;
        }
        if let Some(pos) = &self.positions {
            super::check_positions(pos)?;
        }
        // Every name must be a scheme (or one point of the loading grid): a
        // typo must not silently shrink the comparison to the names that matched.
        let valid: Vec<String> = SchemeId::ALL
            .into_iter()
            .filter(|id| id.scheme().handles_missing())
            .map(|id| id.name().to_string())
            .collect();
        for name in &self.schemes {
            let grid_point = name.starts_with("diagonal-loading(") && name.ends_with(')');
            if !valid.contains(name) && !grid_point {
                return Err(LacunaError::UnknownName {
                    setting: "schemes".into(),
                    value: name.clone(),
                    valid,
                    closest: crate::schemes::closest_scheme_name(name).map(str::to_string),
                });
            }
        }
        Ok(())
    }

    fn wants(&self, id: SchemeId) -> bool {
        self.schemes.is_empty() || self.schemes.iter().any(|n| n == id.name())
    }

    /// The candidates for this set: every scheme asked for, plus the
    /// scale-corrected masked mean (population target) or the
    /// regularise-then-average grid (rank-deficient trials).
    fn candidates(&self, rank_deficient: bool) -> Result<(Vec<Candidate>, SchemeOptions)> {
        let base = SchemeOptions {
            stop: crate::solve::StopRule {
                tol: self.tol,
                max_iter: 500,
            },
            samples: self.samples,
            positions: self.positions.clone().map(Arc::new),
            seed: self.seed,
            shrinkage: self.shrinkage,
            ..SchemeOptions::default()
        };
        let mut candidates = default_candidates(&base, &self.schemes, &self.loading_grid);
        if self.target == Target::Population
            && !rank_deficient
            && (self.samples.is_some() || self.effective_samples.is_some())
            && self.wants(SchemeId::AirmObserved)
        {
            let n = super::mean::degrees_of_freedom(self.samples, self.effective_samples)?;
            candidates.push(Candidate {
                label: "airm-observed+scale-corrected".into(),
                id: SchemeId::AirmObserved,
                scheme: SchemeId::AirmObserved.scheme(),
                options: SchemeOptions {
                    scale_correction: Some(n),
                    ..base.clone()
                },
            });
        }
        if rank_deficient && self.wants(SchemeId::AirmObserved) {
            candidates.extend(regularized_candidates(&base));
        }
        if candidates.is_empty() {
            return Err(LacunaError::InvalidOption(format!(
                "schemes {}: none of these is a scheme that accepts missing channels",
                self.schemes.join(",")
            )));
        }
        Ok((candidates, base))
    }

    /// Runs the comparison on `set` (labels and sessions, when present, feed
    /// the decoding check). `progress` sees every stage and step.
    pub fn run(&self, set: TrialSet, progress: Option<CompareProgress>) -> Result<Comparison> {
        self.validate()?;
        let say = |stage: &str, done: usize, total: usize| {
            if let Some(p) = &progress {
                p(stage, done, total);
            }
        };
        let started = Instant::now();
        let mut set = set;
        let ident = identifiability(&set);
        if let Some(&c) = ident.never_observed.first() {
            if !self.drop_unobserved {
                return Err(LacunaError::NeverObserved {
                    channel: set.channels()[c].clone(),
                    count: ident.never_observed.len(),
                });
            }
            set = set.without_channels(&ident.never_observed)?;
        }
        let p = set.n_channels();
        let ranks = rank_table(&set, self.samples);
        let rank_deficient = !ranks.deficient.is_empty();
        let (candidates, base) = self.candidates(rank_deficient)?;
        let mut stage_seconds = BTreeMap::new();

        // Every candidate, side by side.
        let t0 = Instant::now();
        let n_cand = candidates.len();
        say("schemes", 0, n_cand);
        let done = std::sync::atomic::AtomicUsize::new(0);
        let results: Vec<(std::result::Result<MeanResult, String>, f64)> =
            crate::select::map_units(n_cand, crate::select::side_by_side(&set), |k| {
                let c = &candidates[k];
                let t = Instant::now();
                let r = c.run(&set).map_err(|e| e.to_string());
                let d = done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
                say("schemes", d, n_cand);
                (r, t.elapsed().as_secs_f64())
            });
        stage_seconds.insert("schemes".to_string(), t0.elapsed().as_secs_f64());

        let distances = distance_matrix(&candidates, &results, p);
        // The protocols re-solve each candidate on parts of the set: start
        // them from the candidate's mean on the whole set.
        let warmed: Vec<Candidate> = candidates
            .iter()
            .zip(&results)
            .map(|(c, (r, _))| c.warm_started(r.as_ref().ok().map(|m| &m.mean)))
            .collect();

        // The selection protocols.
        let sel_opts = SelectOptions {
            target: self.target,
            criterion: if self.target == Target::Population || rank_deficient {
                FitCriterion::Likelihood
            } else {
                FitCriterion::AffineDistance
            },
            repeats: self.repeats,
            folds: self.folds,
            seed: self.seed,
            ..SelectOptions::default()
        };
        let with_steps = |stage: &'static str, total: usize| {
            let counter = Arc::new(std::sync::atomic::AtomicUsize::new(0));
            let progress = progress.clone();
            if let Some(p) = &progress {
                p(stage, 0, total);
            }
            SelectOptions {
                on_step: Some(Arc::new(move || {
                    let d = counter.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
                    if let Some(p) = &progress {
                        p(stage, d, total);
                    }
                })),
                ..sel_opts.clone()
            }
        };
        let (dropout, fit, dec, rec) = if self.no_validation {
            (None, None, None, None)
        } else {
            // Rank-deficient trials have no complete-data Riemannian
            // reference and infinite distances to any SPD mean: only the
            // held-out likelihood is defined there.
            let t = Instant::now();
            let dropout = if rank_deficient {
                None
            } else {
                let o = with_steps("simulated dropout (repeats)", self.repeats);
                Some(simulated_dropout(&set, &warmed, &o)?)
            };
            stage_seconds.insert("simulated_dropout".into(), t.elapsed().as_secs_f64());
            let t = Instant::now();
            let o = with_steps("held-out fit (folds)", self.folds);
            let fit = held_out_fit(&set, &warmed, &o)?;
            stage_seconds.insert("held_out_fit".into(), t.elapsed().as_secs_f64());
            let t = Instant::now();
            let dec = if rank_deficient {
                None
            } else {
                let o = with_steps("decoding (folds)", self.folds);
                decoding(&set, &warmed, &o)?
            };
            stage_seconds.insert("decoding".into(), t.elapsed().as_secs_f64());
            let rec = recommend(dropout.as_ref(), Some(&fit), dec.as_ref(), self.target, p);
            (dropout, Some(fit), dec, Some(rec))
        };

        // Contributions to the masked mean (the plain candidate, no regulariser).
        let masked = candidates
            .iter()
            .position(|c| {
                c.id == SchemeId::AirmObserved
                    && c.options.regularize.is_none()
                    && c.options.scale_correction.is_none()
            })
            .and_then(|k| results[k].0.as_ref().ok());
        let contrib = match masked {
            Some(m) => {
                say("per-channel contributions", 0, 1);
                let t = Instant::now();
                let c = contributions(
                    &set,
                    &m.mean,
                    &ContributionOptions {
                        leave_one_out: !self.no_leave_out,
                        leave_out_trials: self.leave_out_trials,
                        bootstrap: self.bootstrap,
                        seed: self.seed,
                        scheme_options: base.clone(),
                    },
                )?;
                stage_seconds.insert("contributions".into(), t.elapsed().as_secs_f64());
                say("per-channel contributions", 1, 1);
                Some(c)
            }
            None => None,
        };

        let schemes = candidates
            .iter()
            .zip(&results)
            .map(|(c, (r, secs))| match r {
                Ok(m) => SchemeRow::Ok(scheme_mean(&set, &c.label, m, *secs)),
                Err(e) => SchemeRow::NotApplicable {
                    scheme: c.label.clone(),
                    reason: e.clone(),
                },
            })
            .collect();
        Ok(Comparison {
            compare_version: COMPARE_VERSION.into(),
            lacuna_version: env!("CARGO_PKG_VERSION").into(),
            caution: CAUTION.into(),
            trials: set.len(),
            channels: set.channels().to_vec(),
            coobservation: set.coobservation_counts(),
            unconstrained_pairs: identifiability(&set).unconstrained_pairs,
            seed: self.seed,
            seconds: started.elapsed().as_secs_f64(),
            stage_seconds,
            schemes,
            distances: DistanceTable {
                schemes: candidates.iter().map(|c| c.label.clone()).collect(),
                matrix: distances,
            },
            target: self.target,
            unit: self.unit.as_deref().map(super::mean::display_unit),
            covariance_unit: super::mean::covariance_unit(self.unit.as_deref()),
            provenance: None,
            ranks,
            simulated_dropout: dropout.as_ref().map(Into::into),
            held_out_fit: fit.as_ref().map(Into::into),
            decoding: dec.as_ref().map(Into::into),
            recommendation: rec,
            contributions: contrib,
        })
    }
}

/// Channels a result estimates (all when it does not say).
fn estimated(r: &MeanResult, p: usize) -> Vec<usize> {
    r.diagnostics
        .estimated_channels
        .clone()
        .unwrap_or_else(|| (0..p).collect())
}

/// Affine-invariant distances between the means on the channels both estimate.
fn distance_matrix(
    candidates: &[Candidate],
    results: &[(std::result::Result<MeanResult, String>, f64)],
    p: usize,
) -> Vec<Vec<Option<f64>>> {
    let ok: Vec<(usize, &MeanResult)> = results
        .iter()
        .enumerate()
        .filter_map(|(k, (r, _))| r.as_ref().ok().map(|m| (k, m)))
        .collect();
    let mut distances = vec![vec![None; candidates.len()]; candidates.len()];
    for &(i, ri) in &ok {
        for &(j, rj) in &ok {
            let eb = estimated(rj, p);
            let common: Vec<usize> = estimated(ri, p)
                .into_iter()
                .filter(|c| eb.contains(c))
                .collect();
            distances[i][j] = Some(if i == j {
                0.0
            } else {
                airm_distance(&sub_block(&ri.mean, &common), &sub_block(&rj.mean, &common))
            });
        }
    }
    distances
}

/// Weighted mean squared distance of observed blocks to the mean's
/// sub-blocks, and the weighted mean of log det M_oo − log det C_i (swelling).
fn dispersion_and_gap(set: &TrialSet, r: &MeanResult) -> (f64, f64) {
    let w = set.normalized_weights();
    let est = r.diagnostics.estimated_channels.clone();
    let parts: Vec<(f64, f64)> = set
        .trials()
        .par_iter()
        .zip(w.par_iter())
        .map(|(t, &wi)| {
            let Some((m, c)) = matching_blocks(&r.mean, est.as_deref(), t) else {
                return (0.0, 0.0);
            };
            let d = airm_distance(&m, &c);
            let gap = log_det(&m).unwrap_or(f64::NAN) - log_det(&c).unwrap_or(f64::NAN);
            (wi * d * d, wi * gap)
        })
        .collect();
    parts
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x, b + y))
}

/// One candidate's row: its published mean (NaN outside the estimated
/// channels) and the numbers the tables show.
fn scheme_mean(set: &TrialSet, label: &str, m: &MeanResult, seconds: f64) -> SchemeMean {
    let p = set.n_channels();
    let (dispersion, gap) = dispersion_and_gap(set, m);
    let est = estimated(m, p);
    let est_block: Mat = sub_block(&m.mean, &est);
    let published = m.published();
    SchemeMean {
        scheme: label.to_string(),
        converged: m.diagnostics.converged,
        iterations: m.diagnostics.iterations,
        seconds,
        condition_number: condition_number(&est_block),
        log_det: log_det(&est_block),
        log_det_gap: gap,
        dispersion,
        estimated_channels: est.len(),
        notes: m.diagnostics.notes.clone(),
        outliers: m.diagnostics.outliers.clone(),
        mean_file: format!("means/{}.npy", file_stem(label)),
        mean: (0..p)
            .map(|i| {
                (0..p)
                    .map(|j| Some(published[(i, j)]).filter(|v| v.is_finite()))
                    .collect()
            })
            .collect(),
        trace: m.diagnostics.trace.clone(),
    }
}

//! The mean job: one scheme on one trial set, with its diagnostics and the
//! report. `lacuna mean` and the Python package's `lacuna.mean` both run
//! [`MeanJob::run`], so they give the same mean bit for bit.

use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Instant;

use serde::{Deserialize, Serialize};

use crate::diagnose::summary::MeanSummary;
use crate::diagnose::{Identifiability, RankTable, identifiability, rank_table, summarize};
use crate::report::json::MeanReport;
use crate::report::provenance::Provenance;
use crate::schemes::regularize::Regularizer;
use crate::schemes::{InitRule, Observer};
use crate::solve::StopRule;
use crate::trials::TrialSet;
use crate::{LacunaError, MeanResult, Result, SchemeOptions, scheme_by_name};

/// Accepted ranges of the numeric settings (inclusive). The CLI states and
/// checks the same ranges under its flag names.
pub mod ranges {
    pub const TOL: (f64, f64) = crate::solve::StopRule::TOL;
    pub const MAX_ITER: (usize, usize) = crate::solve::StopRule::MAX_ITER;
    pub const STARTS: (usize, usize) = (1, 1000);
    pub const LOADING: (f64, f64) = crate::schemes::LOADING_RANGE;
    pub const SHRINKAGE: (f64, f64) = crate::schemes::SHRINKAGE_RANGE;
    pub const SAMPLES: (usize, usize) = (2, 1_000_000_000);
    pub const RANK: (usize, usize) = (1, 100_000);
    pub const EFFECTIVE_SAMPLES: (f64, f64) = (1e-300, 1e9);
}

/// What to compute: the scheme and its settings, with the CLI's defaults.
#[derive(Debug, Clone, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MeanJob {
    /// Averaging scheme name (`lacuna schemes`).
    pub scheme: String,
    /// Stop when the whitened Riemannian gradient norm is at or below this.
    pub tol: f64,
    /// Iteration cap; None = the scheme's default (500; gaussian-em 5 000).
    pub max_iter: Option<usize>,
    /// Starting point of airm-observed: available-case, diagonal, scaled-identity.
    pub init: String,
    /// Starts of the multi-start check (1 = off).
    pub starts: usize,
    pub seed: u64,
    /// λ of diagonal-loading.
    pub loading: f64,
    /// α of shrinkage.
    pub shrinkage: f64,
    /// Samples per trial, when known.
    pub samples: Option<usize>,
    /// Rank of subspace.
    pub rank: Option<usize>,
    /// Electrode positions by channel name (spherical-spline).
    pub positions: Option<BTreeMap<String, [f64; 3]>>,
    /// Remove the short-window scale bias (airm-observed, airm).
    pub correct_scale: bool,
    /// Degrees of freedom for `correct_scale`, when not samples − 1.
    pub effective_samples: Option<f64>,
    /// Regulariser applied to every block first (`shrinkage:α`, `loading:λ`, `oas`).
    pub regularize: Option<String>,
    /// Leave out channels no trial observed instead of refusing.
    pub drop_unobserved: bool,
    /// Plain L-BFGS for airm-observed, without the preconditioner that
    /// serves unequally covered channels.
    pub no_precondition: bool,
    /// Threshold of airm-observed-huber, as a multiple of the median
    /// distance to the squared-distance masked mean.
    pub huber: f64,
    /// Physical unit of the data (e.g. uV or µV), recorded in the report.
    pub unit: Option<String>,
}

impl Default for MeanJob {
    fn default() -> Self {
        MeanJob {
            scheme: "airm-observed".into(),
            tol: 1e-10,
            max_iter: None,
            init: "available-case".into(),
            starts: 1,
            seed: 0,
            loading: 1e-2,
            shrinkage: 0.1,
            samples: None,
            rank: None,
            positions: None,
            correct_scale: false,
            effective_samples: None,
            regularize: None,
            drop_unobserved: false,
            no_precondition: false,
            huber: 1.5,
            unit: None,
        }
    }
}

use super::{float_in, int_in};

/// Degrees of freedom for the scale-bias correction: `effective` when given,
/// else `samples − 1` (windows centred on their mean).
pub fn degrees_of_freedom(samples: Option<usize>, effective: Option<f64>) -> Result<f64> {
    match (effective, samples) {
        (Some(n), _) if n.is_finite() && n > 0.0 && n <= ranges::EFFECTIVE_SAMPLES.1 => Ok(n),
        (Some(n), _) => Err(LacunaError::OutOfRange {
            setting: "effective_samples".into(),
            value: n.to_string(),
            allowed: "a positive number up to 1e9".into(),
        }),
        (None, Some(t)) if t >= 2 => Ok((t - 1) as f64),
        (None, Some(t)) => Err(LacunaError::OutOfRange {
            setting: "samples".into(),
            value: t.to_string(),
            allowed: "at least 2 for the scale-bias correction".into(),
        }),
        (None, None) => Err(LacunaError::MissingSetting {
            setting: "samples".into(),
            needed_for: "the scale-bias correction (correct_scale)".into(),
        }),
    }
}

/// A unit as shown: `uV` becomes `µV` (EDF headers spell micro with a u).
pub fn display_unit(u: &str) -> String {
    let u = u.trim();
    match u.strip_prefix('u') {
        Some(rest) if !rest.is_empty() && rest.chars().all(|c| c.is_ascii_alphabetic()) => {
            format!("µ{rest}")
        }
        _ => u.to_string(),
    }
}

/// The covariance unit of data in `unit` (its square), if known.
pub fn covariance_unit(unit: Option<&str>) -> Option<String> {
    unit.filter(|u| !u.trim().is_empty())
        .map(|u| format!("{}²", display_unit(u)))
}

impl MeanJob {
    /// Checks every setting before any work, and turns names into the
    /// solver's options. Nothing is silently changed.
    pub fn options(&self, observer: Option<Observer>) -> Result<SchemeOptions> {
        if scheme_by_name(&self.scheme).is_none() {
            return Err(LacunaError::UnknownName {
                setting: "scheme".into(),
                value: self.scheme.clone(),
                valid: crate::all_schemes()
                    .iter()
                    .map(|s| s.name().to_string())
                    .collect(),
                closest: crate::schemes::closest_scheme_name(&self.scheme).map(str::to_string),
            });
        }
        let init = InitRule::from_name(&self.init).ok_or_else(|| LacunaError::UnknownName {
            setting: "init".into(),
            value: self.init.clone(),
            valid: ["available-case", "diagonal", "scaled-identity"]
                .map(String::from)
                .to_vec(),
            closest: None,
        })?;
        float_in("tol", self.tol, ranges::TOL)?;
        let max_iter = match self.max_iter {
            Some(m) => m,
            None => crate::schemes::SchemeId::from_name(&self.scheme)
                .map_or(500, crate::schemes::SchemeId::default_max_iter),
        };
        int_in("max_iter", max_iter, ranges::MAX_ITER)?;
        int_in("starts", self.starts, ranges::STARTS)?;
        float_in("loading", self.loading, ranges::LOADING)?;
        float_in("shrinkage", self.shrinkage, ranges::SHRINKAGE)?;
        if let Some(t) = self.samples {
            int_in("samples", t, ranges::SAMPLES)?;
        }
        if let Some(r) = self.rank {
            int_in("rank", r, ranges::RANK)?;
        }
        if let Some(pos) = &self.positions {
            super::check_positions(pos)?;
        }
        Ok(SchemeOptions {
            stop: StopRule {
                tol: self.tol,
                max_iter,
            },
            init,
            starts: self.starts,
            seed: self.seed,
            observer,
            loading: self.loading,
            shrinkage: self.shrinkage,
            samples: self.samples,
            rank: self.rank,
            positions: self.positions.clone().map(Arc::new),
            warm_start: None,
            precondition: !self.no_precondition,
            eliminate_rare: true,
            huber: self.huber,
            scale_correction: if self.correct_scale {
                Some(degrees_of_freedom(self.samples, self.effective_samples)?)
            } else {
                None
            },
            regularize: match &self.regularize {
                Some(spec) => Some(
                    Regularizer::parse(spec, self.samples)
                        .map_err(|e| LacunaError::InvalidOption(format!("regularize: {e}")))?,
                ),
                None => None,
            },
        })
    }

    /// Runs the scheme on `set` (after dropping never-observed channels when
    /// asked). `observer` sees every accepted iteration (progress).
    pub fn run(&self, set: TrialSet, observer: Option<Observer>) -> Result<MeanRun> {
        let options = self.options(observer)?;
        let scheme = scheme_by_name(&self.scheme).expect("checked by options()");
        let started = Instant::now();
        let mut set = set;
        let mut dropped = Vec::new();
        let mut ident = identifiability(&set);
        if self.drop_unobserved && !ident.never_observed.is_empty() {
            dropped = ident
                .never_observed
                .iter()
                .map(|&c| set.channels()[c].clone())
                .collect();
            set = set.without_channels(&ident.never_observed)?;
            ident = identifiability(&set);
        }
        let result = scheme.average(&set, &options)?;
        let elapsed_seconds = started.elapsed().as_secs_f64();
        let summary = summarize(&set, &result.mean);
        let ranks = rank_table(&set, self.samples);
        Ok(MeanRun {
            set,
            result,
            ident,
            summary,
            ranks,
            dropped,
            elapsed_seconds,
            regularizer: options.regularize,
            unit: self.unit.clone(),
        })
    }
}

/// Everything one mean job produced.
pub struct MeanRun {
    /// The trial set averaged (without dropped channels).
    pub set: TrialSet,
    pub result: MeanResult,
    pub ident: Identifiability,
    pub summary: MeanSummary,
    pub ranks: RankTable,
    /// Channels left out because no trial observed them.
    pub dropped: Vec<String>,
    pub elapsed_seconds: f64,
    pub regularizer: Option<Regularizer>,
    pub unit: Option<String>,
}

impl MeanRun {
    /// The report (`--report` of `lacuna mean`), with the inputs' provenance
    /// when they came from files.
    pub fn report(&self, provenance: Option<Provenance>) -> MeanReport<'_> {
        let mut report = MeanReport::new(
            &self.result,
            &self.ident,
            &self.summary,
            self.set.channels(),
            self.set.len(),
            self.dropped.clone(),
            self.elapsed_seconds,
            rayon::current_num_threads(),
        );
        report.ranks = Some(&self.ranks);
        report.provenance = provenance;
        report.unit = self.unit.as_deref().map(display_unit);
        report.covariance_unit = covariance_unit(self.unit.as_deref());
        report.regularizer = self.regularizer;
        report
    }

    /// Whether the result is what the docs say it is (exit 0); otherwise the
    /// report's advice says why (exit 4).
    pub fn converged(&self) -> bool {
        self.result.diagnostics.converged
    }
}

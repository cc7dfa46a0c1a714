//! The JSON report of `lacuna mean`.
//!
//! Fields required by the interchange contract (GUIDE §4): `converged`,
//! `iterations`, `gradient_norm`, `unconstrained_pairs`. The rest is listed in
//! docs/formats.md.

use serde::Serialize;

use crate::diagnose::{Identifiability, MeanSummary};
use crate::schemes::{MeanResult, StartOutcome};
use crate::solve::{IterRecord, StopReason};

/// Version of the report layout; bumped when a field changes meaning.
pub const REPORT_VERSION: &str = "1";

/// Everything `lacuna mean` writes to `--report`.
#[derive(Debug, Serialize)]
pub struct MeanReport<'a> {
    pub report_version: &'static str,
    pub lacuna_version: &'static str,
    pub caution: &'static str,
    pub scheme: &'a str,
    pub converged: bool,
    pub stop_reason: Option<StopReason>,
    pub iterations: usize,
    pub evaluations: usize,
    pub gradient_norm: Option<f64>,
    pub gradient_norm_definition: &'static str,
    pub tolerance: Option<f64>,
    pub cost: Option<f64>,
    pub wall_time_seconds: f64,
    pub threads: usize,
    pub n_trials: usize,
    pub channels: &'a [String],
    pub dropped_channels: Vec<String>,
    pub unconstrained_pairs: &'a [[usize; 2]],
    pub completed_pairs: usize,
    pub coobservation: &'a [Vec<usize>],
    pub coverage: &'a [crate::diagnose::summary::ChannelCoverage],
    pub condition_number: f64,
    pub log_det_mean: f64,
    pub mean_log_det_complete_trials: Option<f64>,
    pub pattern_log_det: &'a [crate::diagnose::summary::PatternSwelling],
    pub starts: &'a [StartOutcome],
    pub starts_agree: Option<bool>,
    pub ranks: Option<&'a crate::diagnose::RankTable>,
    pub provenance: Option<crate::report::provenance::Provenance>,
    /// With several stack files: where each shard's trials are in the set.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub shards: Option<Vec<crate::trials::shards::ShardExtent>>,
    /// Physical unit of the data, and of the covariances (its square).
    pub unit: Option<String>,
    pub covariance_unit: Option<String>,
    pub regularizer: Option<crate::schemes::regularize::Regularizer>,
    pub boundary: Option<&'a crate::schemes::VanishingDirection>,
    /// Trials flagged as far from the mean (robust schemes only).
    pub outliers: &'a [crate::schemes::OutlierTrial],
    pub notes: &'a [String],
    pub advice: Vec<String>,
    pub trace: &'a [IterRecord],
}

/// Text that defines the reported gradient norm.
pub const GRADIENT_NORM_DEFINITION: &str = "Frobenius norm of the whitened Riemannian gradient W^-1 grad F W^-T at X = W W^T, F = 1/2 sum_i w_i d^2 with weights normalised to sum 1 (affine-invariant, unit-free)";

impl<'a> MeanReport<'a> {
    /// Assembles the report from a result and the read-only summaries.
    #[allow(clippy::too_many_arguments)]
    pub fn new(
        result: &'a MeanResult,
        ident: &'a Identifiability,
        summary: &'a MeanSummary,
        channels: &'a [String],
        n_trials: usize,
        dropped_channels: Vec<String>,
        wall_time_seconds: f64,
        threads: usize,
    ) -> Self {
        let d = &result.diagnostics;
        let mut advice = Vec::new();
        if !d.converged {
            advice.push(match d.stop_reason {
                Some(StopReason::MaxIterations) => "the iteration cap was reached: raise --max-iter, or check the trace for slow progress".to_string(),
                Some(StopReason::LineSearchStalled) => "no further decrease was possible at double precision: the gradient norm above is the attainable floor on these data; loosen --tol to accept it".to_string(),
                Some(StopReason::Boundary) => "the observed blocks admit no positive definite mean (see notes and `boundary`): use a regularising scheme (shrinkage, diagonal-loading, gaussian-em), leave out one of the channels named there, or add trials that observe them together".to_string(),
                _ => "see the trace".to_string(),
            });
        }
        if d.starts_agree == Some(false) {
            advice.push(
                "starts disagree: compare the listed start costs; the lowest-cost mean is reported"
                    .into(),
            );
        }
        MeanReport {
            report_version: REPORT_VERSION,
            lacuna_version: env!("CARGO_PKG_VERSION"),
            caution: crate::jobs::comparison::CAUTION,
            scheme: &result.scheme,
            converged: d.converged,
            stop_reason: d.stop_reason,
            iterations: d.iterations,
            evaluations: d.evaluations,
            gradient_norm: d.gradient_norm,
            gradient_norm_definition: GRADIENT_NORM_DEFINITION,
            tolerance: d.tolerance,
            cost: d.cost,
            wall_time_seconds,
            threads,
            n_trials,
            channels,
            dropped_channels,
            unconstrained_pairs: &d.unconstrained_pairs,
            completed_pairs: d.completed_pairs,
            coobservation: &ident.coobservation,
            coverage: &summary.coverage,
            condition_number: summary.condition_number,
            log_det_mean: summary.log_det_mean,
            mean_log_det_complete_trials: summary.mean_log_det_complete_trials,
            pattern_log_det: &summary.patterns,
            starts: &d.starts,
            starts_agree: d.starts_agree,
            ranks: None,
            provenance: None,
            shards: None,
            unit: None,
            covariance_unit: None,
            regularizer: None,
            boundary: d.boundary.as_ref(),
            outliers: &d.outliers,
            notes: &d.notes,
            advice,
            trace: &d.trace,
        }
    }

    /// Serialises to pretty JSON (non-finite numbers become null).
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).unwrap_or_else(|e| format!("{{\"error\": \"{e}\"}}"))
    }
}

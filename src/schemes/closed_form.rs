//! Closed-form means of complete trials: arithmetic, harmonic, log-Euclidean.
//!
//! - arithmetic `Σ ŵ C_i` — the Euclidean barycentre;
//! - harmonic `(Σ ŵ C_i⁻¹)⁻¹`;
//! - log-Euclidean `exp(Σ ŵ log C_i)` (Arsigny, Fillard, Pennec, Ayache 2007,
//!   SIAM J. Matrix Anal. Appl.).
//!
//! For the same weights, harmonic ≤ Karcher ≤ arithmetic in the Löwner order
//! (Ando, Li, Mathias 2004), which the tests check.

use super::{AveragingScheme, Diagnostics, MeanResult, SchemeOptions, weighted_sum};
use crate::error::Result;
use crate::spd::functions::inv_spd;
use crate::spd::{expm_sym, logm_spd, symmetrize};
use crate::trials::TrialSet;

/// Euclidean (arithmetic) mean.
pub struct Arithmetic;
/// Harmonic mean.
pub struct Harmonic;
/// Log-Euclidean mean.
pub struct LogEuclidean;

impl AveragingScheme for Arithmetic {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::Arithmetic
    }
    /// Accepts rank-deficient blocks: a Euclidean average.
    fn accepts_rank_deficient(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "weighted entry-wise average of complete trials"
    }
    fn handles_missing(&self) -> bool {
        false
    }
    fn compute(&self, trials: &TrialSet, _: &SchemeOptions) -> Result<MeanResult> {
        let blocks = trials.complete_blocks(self.name())?;
        let mean = symmetrize(&weighted_sum(&blocks, &trials.normalized_weights(), |c| {
            c.clone()
        }));
        Ok(MeanResult {
            scheme: self.name().into(),
            mean,
            diagnostics: Diagnostics::closed_form(vec![]),
        })
    }
}

impl AveragingScheme for Harmonic {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::Harmonic
    }
    fn summary(&self) -> &'static str {
        "inverse of the weighted average of inverses, complete trials"
    }
    fn handles_missing(&self) -> bool {
        false
    }
    fn compute(&self, trials: &TrialSet, _: &SchemeOptions) -> Result<MeanResult> {
        let blocks = trials.complete_blocks(self.name())?;
        let s = weighted_sum(&blocks, &trials.normalized_weights(), inv_spd);
        Ok(MeanResult {
            scheme: self.name().into(),
            mean: inv_spd(&symmetrize(&s)),
            diagnostics: Diagnostics::closed_form(vec![]),
        })
    }
}

impl AveragingScheme for LogEuclidean {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::LogEuclidean
    }
    fn summary(&self) -> &'static str {
        "exponential of the weighted average of matrix logarithms, complete trials"
    }
    fn handles_missing(&self) -> bool {
        false
    }
    fn compute(&self, trials: &TrialSet, _: &SchemeOptions) -> Result<MeanResult> {
        let blocks = trials.complete_blocks(self.name())?;
        let s = weighted_sum(&blocks, &trials.normalized_weights(), logm_spd);
        Ok(MeanResult {
            scheme: self.name().into(),
            mean: expm_sym(&symmetrize(&s)),
            diagnostics: Diagnostics::closed_form(vec![]),
        })
    }
}

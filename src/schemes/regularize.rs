//! Regularise-then-average: make every observed block positive definite
//! before a scheme sees it.
//!
//! Rank-deficient windows (average reference: rank k−1; components removed:
//! rank k−m; windows of T < k samples: rank T−1) have no place on the SPD
//! manifold. A regulariser moves each observed block `C` (size `k`) inside
//! it, on the trial's own channels — nothing is filled for channels the trial
//! did not observe:
//! - `loading:λ` — `C + λ (tr C / k) I` (diagonal loading relative to the
//!   block's mean variance);
//! - `shrinkage:α` — `(1−α) C + α (tr C / k) I` (fixed-intensity shrinkage
//!   towards a scaled identity; the target of Ledoit & Wolf 2004, J.
//!   Multivariate Anal. 88);
//! - `oas` — the same with each trial's oracle-approximating intensity (Chen,
//!   Wiesel, Eldar & Hero 2010, IEEE Trans. Signal Process. 58), which needs
//!   the samples per window `T` (`--samples`).
//!
//! The regularised set then goes to any scheme; the report records the
//! regulariser and the intensities used. Every regulariser adds bias (it
//! pulls each block towards a multiple of the identity) and removes
//! variance (and, here, the singularity); `compare` chooses the strength by
//! held-out likelihood (docs/schemes.md).

use crate::error::{LacunaError, Result};
use crate::spd::Mat;
use crate::trials::TrialSet;

/// A per-block regulariser.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Regularizer {
    /// `C + λ (tr C / k) I`, λ > 0.
    Loading { lambda: f64 },
    /// `(1−α) C + α (tr C / k) I`, α in (0, 1].
    Shrinkage { alpha: f64 },
    /// Shrinkage with each block's OAS intensity for `samples` per window.
    Oas { samples: usize },
}

impl Regularizer {
    /// Parses `loading:λ`, `shrinkage:α` or `oas` (with `samples` known).
    pub fn parse(spec: &str, samples: Option<usize>) -> std::result::Result<Self, String> {
        let (kind, value) = match spec.split_once(':') {
            Some((k, v)) => (k.trim(), Some(v.trim())),
            None => (spec.trim(), None),
        };
        let number = |v: Option<&str>| -> std::result::Result<f64, String> {
            let v = v.ok_or_else(|| format!("'{spec}' needs a value, e.g. {kind}:0.01"))?;
            v.parse::<f64>()
                .map_err(|_| format!("'{v}' in '{spec}' is not a number"))
        };
        let r = match kind {
            "loading" => Regularizer::Loading {
                lambda: number(value)?,
            },
            "shrinkage" => Regularizer::Shrinkage {
                alpha: number(value)?,
            },
            "oas" => Regularizer::Oas {
                samples: samples.ok_or_else(|| {
                    "'oas' needs the samples per window (the setting 'samples')".to_string()
                })?,
            },
            _ => {
                return Err(format!(
                    "'{spec}' is not a regulariser; use loading:λ, shrinkage:α or oas"
                ));
            }
        };
        r.check()?;
        Ok(r)
    }

    /// Checks the parameter's range (never silently changed).
    pub fn check(&self) -> std::result::Result<(), String> {
        match *self {
            Regularizer::Loading { lambda } if !(lambda > 0.0 && lambda <= 1e6) => {
                Err(format!("loading λ must be in (0, 1e6], got {lambda}"))
            }
            Regularizer::Shrinkage { alpha } if !(alpha > 0.0 && alpha <= 1.0) => {
                Err(format!("shrinkage α must be in (0, 1], got {alpha}"))
            }
            Regularizer::Oas { samples } if samples < 2 => Err(format!(
                "oas needs at least 2 samples per window, got {samples}"
            )),
            _ => Ok(()),
        }
    }

    /// Short label for tables: `loading(0.01)`, `shrinkage(0.1)`, `oas(T=48)`.
    pub fn label(&self) -> String {
        match *self {
            Regularizer::Loading { lambda } => format!("loading({lambda:e})"),
            Regularizer::Shrinkage { alpha } => format!("shrinkage({alpha})"),
            Regularizer::Oas { samples } => format!("oas(T={samples})"),
        }
    }

    /// The intensity applied to one block: `(weight on C, weight on tr C/k · I)`.
    fn weights(&self, block: &Mat) -> (f64, f64) {
        match *self {
            Regularizer::Loading { lambda } => (1.0, lambda),
            Regularizer::Shrinkage { alpha } => (1.0 - alpha, alpha),
            Regularizer::Oas { samples } => {
                let a = crate::ingest::covariance::oas_intensity(block, samples);
                (1.0 - a, a)
            }
        }
    }

    /// Regularises one block.
    pub fn apply_block(&self, block: &Mat) -> Mat {
        let k = block.nrows();
        let (keep, add) = self.weights(block);
        let mut m = block * keep;
        let target = block.trace() / k as f64;
        for a in 0..k {
            m[(a, a)] += add * target;
        }
        m
    }

    /// Regularises every trial of `set`; returns the new set and a note.
    pub fn apply(&self, set: &TrialSet) -> Result<(TrialSet, String)> {
        self.check().map_err(LacunaError::InvalidOption)?;
        let intensities: Vec<f64> = set
            .trials()
            .iter()
            .map(|t| self.weights(&t.block).1)
            .collect();
        let out = set.map_blocks("regularised trials", |_, t| self.apply_block(&t.block))?;
        let lo = intensities.iter().copied().fold(f64::INFINITY, f64::min);
        let hi = intensities.iter().copied().fold(0.0f64, f64::max);
        let note = match self {
            Regularizer::Oas { samples } => format!(
                "every observed block was first regularised by OAS shrinkage towards (tr C/k)·I for T = {samples} samples (intensities {lo:.3}–{hi:.3}); {} of {} blocks were rank-deficient before",
                set.rank_deficient().len(),
                set.len()
            ),
            _ => format!(
                "every observed block was first regularised by {} (on its own channels, relative to tr C/k); {} of {} blocks were rank-deficient before",
                self.label(),
                set.rank_deficient().len(),
                set.len()
            ),
        };
        Ok((out, note))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Closed forms of the definitions above (common practice, no source).
    #[test]
    fn blocks_match_their_closed_forms() {
        let c = Mat::from_row_slice(2, 2, &[2.0, 1.0, 1.0, 4.0]);
        let l = Regularizer::Loading { lambda: 0.5 }.apply_block(&c);
        assert_eq!(l, Mat::from_row_slice(2, 2, &[3.5, 1.0, 1.0, 5.5]));
        let s = Regularizer::Shrinkage { alpha: 0.25 }.apply_block(&c);
        assert_eq!(s, Mat::from_row_slice(2, 2, &[2.25, 0.75, 0.75, 3.75]));
        assert!(Regularizer::parse("loading:nan", None).is_err());
        assert!(Regularizer::parse("shrinkage:1.5", None).is_err());
        assert!(Regularizer::parse("oas", None).is_err());
        assert!(Regularizer::parse("ridge:1", None).is_err());
        assert_eq!(
            Regularizer::parse("oas", Some(40)),
            Ok(Regularizer::Oas { samples: 40 })
        );
    }
}

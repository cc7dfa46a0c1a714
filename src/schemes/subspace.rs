//! `subspace`: compress every trial to a common r-dimensional subspace,
//! average there, map back.
//!
//! The subspace is spanned by the r leading eigenvectors U_r of the
//! available-case mean A. A trial that observed channels o is compressed by
//! least squares from its observed rows: with P = U_r[o,:],
//! C̃ = P⁺ C_oo P⁺ᵀ, P⁺ = (PᵀP)⁻¹Pᵀ (the latent covariance its observed
//! channels imply). The r×r Karcher mean M of the C̃ is mapped back as
//! U_r M U_rᵀ + σ² (I − U_r U_rᵀ), σ² the mean of A's discarded eigenvalues
//! (the probabilistic-PCA noise floor; Tipping & Bishop 1999, JRSS B).
//!
//! Rank rule (ours, documented in docs/schemes.md): the smallest r whose
//! leading eigenvalues hold 99% of trace A, capped at the fewest channels any
//! trial observed, so every compression is determined; `--rank` overrides.

use super::{AvailableCase, AveragingScheme, Karcher, MeanResult, SchemeOptions};
use crate::error::{LacunaError, Result};
use crate::spd::Mat;
use crate::spd::kernels::{
    cholesky, solve_lower_in_place, solve_lower_transpose_in_place, sym_eigen,
};
use crate::trials::TrialSet;

/// Common-subspace compression, Karcher mean, back-projection.
pub struct Subspace;

impl AveragingScheme for Subspace {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::Subspace
    }
    /// Accepts rank-deficient blocks: the rank is capped at the smallest trial rank, so every compressed block is full rank.
    fn accepts_rank_deficient(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "compress trials to the leading eigenvectors of the available-case mean, Karcher mean there, map back"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let p = set.n_channels();
        let a = AvailableCase.average(set, options)?.mean;
        let e = sym_eigen(&a);
        // Descending order.
        let mut order: Vec<usize> = (0..p).collect();
        order.sort_by(|&i, &j| e.values[j].total_cmp(&e.values[i]));
        let total: f64 = e.values.iter().sum();
        // The fewest channels any trial observed, or its rank when lower.
        let fewest = (0..set.len()).map(|i| set.rank(i)).min().unwrap_or(p);
        let r = match options.rank {
            Some(r) if r >= 1 && r <= fewest => r,
            Some(r) => {
                return Err(LacunaError::OutOfRange {
                    setting: "rank".into(),
                    value: r.to_string(),
                    allowed: format!(
                        "between 1 and {fewest} (the fewest channels any trial observed, or the lowest trial rank)"
                    ),
                });
            }
            None => {
                let mut acc = 0.0;
                let mut r = p;
                for (k, &i) in order.iter().enumerate() {
                    acc += e.values[i];
                    if acc >= 0.99 * total {
                        r = k + 1;
                        break;
                    }
                }
                r.min(fewest).max(1)
            }
        };
        let u = Mat::from_fn(p, r, |i, k| e.vectors[(i, order[k])]);
        let sigma2 = if r < p {
            order[r..].iter().map(|&i| e.values[i]).sum::<f64>() / (p - r) as f64
        } else {
            0.0
        };
        let mut compressed = Vec::with_capacity(set.len());
        let mut weights = Vec::with_capacity(set.len());
        let mut skipped = 0;
        for (t, &w) in set.trials().iter().zip(set.weights()) {
            let pm = Mat::from_fn(t.observed.len(), r, |a, k| u[(t.observed[a], k)]);
            let g = pm.transpose() * &pm;
            let Some(l) = cholesky(&g).filter(|l| {
                let d: Vec<f64> = (0..r).map(|k| l[(k, k)]).collect();
                let (mx, mn) = d
                    .iter()
                    .fold((0.0f64, f64::INFINITY), |(a, b), &v| (a.max(v), b.min(v)));
                mn > 1e-6 * mx
            }) else {
                skipped += 1;
                continue;
            };
            // P⁺ = G⁻¹ Pᵀ.
            let mut pinv = pm.transpose();
            solve_lower_in_place(&l, &mut pinv);
            solve_lower_transpose_in_place(&l, &mut pinv);
            let c = &pinv * &t.block * pinv.transpose();
            compressed.push(crate::spd::symmetrize(&c));
            weights.push(w);
        }
        if compressed.is_empty() {
            return Err(LacunaError::Unsupported(
                "subspace: no trial's observed channels determine the subspace".into(),
            ));
        }
        let names = (1..=r).map(|k| format!("component {k}")).collect();
        let inner = TrialSet::from_full(names, compressed, Some(weights))?;
        // The inner mean lives in the compressed basis: a full-size warm
        // start would be in the wrong coordinates even when the sizes match.
        let inner_options = SchemeOptions {
            warm_start: None,
            ..options.clone()
        };
        let mut res = Karcher.average(&inner, &inner_options)?;
        let back =
            &u * &res.mean * u.transpose() + (Mat::identity(p, p) - &u * u.transpose()) * sigma2;
        let mut notes = vec![format!(
            "rank r = {r} of {p} ({}); discarded directions set to the noise floor σ² = {sigma2:.4e}",
            if options.rank.is_some() {
                "given".to_string()
            } else {
                format!(
                    "99% of the available-case trace, capped at the fewest observed channels, {fewest}"
                )
            }
        )];
        if skipped > 0 {
            notes.push(format!(
                "{skipped} trial(s) left out: their observed channels do not determine the subspace"
            ));
        }
        notes.append(&mut res.diagnostics.notes);
        res.diagnostics.notes = notes;
        res.scheme = self.name().into();
        res.mean = crate::spd::symmetrize(&back);
        Ok(res)
    }
}

//! `spherical-spline`: interpolate each trial's missing channels from its
//! observed ones with spherical splines, then the Karcher mean.
//!
//! Perrin, Pernier, Bertrand & Echallier 1989 ("Spherical splines for scalp
//! potential and current density mapping", Electroenceph. Clin.
//! Neurophysiol.): on the unit sphere, V(e) = c₀ + Σᵢ cᵢ g(cos(e, eᵢ)) with
//! g(x) = (1/4π) Σₙ (2n+1)/(n(n+1))^m Pₙ(x), m = 4, the series cut at 50
//! terms, and Σ cᵢ = 0. Solving [[G, 1], [1ᵀ, 0]] [c; c₀] = [v; 0] on the
//! observed electrodes gives a linear map W from observed to missing
//! potentials, so a trial's full covariance is T C_oo Tᵀ with T = [I; W]
//! (rows in channel order).
//!
//! That matrix has rank |o|: interpolated channels carry no information of
//! their own. We add an interpolation-error variance of 1% of the trial's
//! mean observed variance to each interpolated channel (an assumption, said
//! in the notes), which makes it SPD: its Schur complement on the missing
//! block is exactly that diagonal.

use super::{AveragingScheme, Karcher, MeanResult, SchemeOptions};
use crate::error::{LacunaError, Result};
use crate::spd::Mat;
use crate::trials::TrialSet;

/// Spherical-spline interpolation of missing channels, then Karcher mean.
pub struct SphericalSpline;

const ORDER: i32 = 4;
const TERMS: usize = 50;
const ERROR_VARIANCE: f64 = 0.01;

/// g(x) of Perrin et al. 1989 with m = 4 and 50 terms.
pub fn spline_g(x: f64) -> f64 {
    let x = x.clamp(-1.0, 1.0);
    // Legendre polynomials by Bonnet's recursion.
    let (mut p0, mut p1) = (1.0, x);
    let mut sum = 0.0;
    for n in 1..=TERMS {
        let nf = n as f64;
        sum += (2.0 * nf + 1.0) / (nf * (nf + 1.0)).powi(ORDER) * p1;
        let p2 = ((2.0 * nf + 1.0) * x * p1 - nf * p0) / (nf + 1.0);
        p0 = p1;
        p1 = p2;
    }
    sum / (4.0 * std::f64::consts::PI)
}

fn cosine(a: &[f64; 3], b: &[f64; 3]) -> f64 {
    let na = (a[0] * a[0] + a[1] * a[1] + a[2] * a[2]).sqrt();
    let nb = (b[0] * b[0] + b[1] * b[1] + b[2] * b[2]).sqrt();
    (a[0] * b[0] + a[1] * b[1] + a[2] * b[2]) / (na * nb)
}

/// The |to| × |from| matrix mapping potentials at `from` to `to`.
pub fn spline_interpolation_matrix(
    positions: &[[f64; 3]],
    from: &[usize],
    to: &[usize],
) -> Option<Mat> {
    let k = from.len();
    let mut a = Mat::zeros(k + 1, k + 1);
    for (i, &fi) in from.iter().enumerate() {
        for (j, &fj) in from.iter().enumerate() {
            a[(i, j)] = spline_g(cosine(&positions[fi], &positions[fj]));
        }
        a[(i, k)] = 1.0;
        a[(k, i)] = 1.0;
    }
    let inv = a.try_inverse()?;
    let mut rhs = Mat::zeros(to.len(), k + 1);
    for (t, &ti) in to.iter().enumerate() {
        for (i, &fi) in from.iter().enumerate() {
            rhs[(t, i)] = spline_g(cosine(&positions[ti], &positions[fi]));
        }
        rhs[(t, k)] = 1.0;
    }
    Some((rhs * inv).columns(0, k).into_owned())
}

impl AveragingScheme for SphericalSpline {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::SphericalSpline
    }
    fn summary(&self) -> &'static str {
        "interpolate missing channels by spherical splines (needs electrode positions), Karcher mean"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let p = set.n_channels();
        let positions = options
            .positions
            .as_ref()
            .ok_or_else(|| LacunaError::MissingSetting {
                setting: "positions".into(),
                needed_for: "spherical-spline (electrode positions, channel,x,y,z)".into(),
            })?;
        let positions: Vec<[f64; 3]> = set
            .channels()
            .iter()
            .map(|c| {
                positions.get(c).copied().ok_or_else(|| {
                    LacunaError::Unsupported(format!(
                        "spherical-spline: no electrode position for channel {c}"
                    ))
                })
            })
            .collect::<Result<_>>()?;
        let mut cache: std::collections::HashMap<Vec<usize>, Mat> = Default::default();
        let mut mats = Vec::with_capacity(set.len());
        let mut interpolated = 0usize;
        for t in set.trials() {
            let o = &t.observed;
            if o.len() == p {
                mats.push(t.block.clone());
                continue;
            }
            let m: Vec<usize> = (0..p).filter(|c| o.binary_search(c).is_err()).collect();
            interpolated += m.len();
            if !cache.contains_key(o) {
                let w = spline_interpolation_matrix(&positions, o, &m).ok_or_else(|| {
                    LacunaError::Numerical(
                        "spherical-spline: singular interpolation system (coincident electrodes?)"
                            .into(),
                    )
                })?;
                cache.insert(o.clone(), w);
            }
            let w = &cache[o];
            let mut tmat = Mat::zeros(p, o.len());
            for (a, &c) in o.iter().enumerate() {
                tmat[(c, a)] = 1.0;
            }
            for (r, &c) in m.iter().enumerate() {
                for a in 0..o.len() {
                    tmat[(c, a)] = w[(r, a)];
                }
            }
            let mut full = &tmat * &t.block * tmat.transpose();
            let err = ERROR_VARIANCE * t.block.trace() / o.len() as f64;
            for &c in &m {
                full[(c, c)] += err;
            }
            mats.push(crate::spd::symmetrize(&full));
        }
        let full =
            TrialSet::from_full(set.channels().to_vec(), mats, Some(set.weights().to_vec()))?;
        let mut r = Karcher.average(&full, options)?;
        let mut notes = vec![format!(
            "{interpolated} trial-channel cells interpolated (spherical splines, m = {ORDER}, {TERMS} terms), each with an assumed interpolation-error variance of {}% of its trial's mean observed variance",
            ERROR_VARIANCE * 100.0
        )];
        notes.append(&mut r.diagnostics.notes);
        r.diagnostics.notes = notes;
        r.scheme = self.name().into();
        Ok(r)
    }
}

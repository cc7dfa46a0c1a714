//! Random SPD matrices, sample-covariance trials and dropout patterns.

use super::rng::Rng;
use crate::spd::kernels::cholesky;
use crate::spd::{Mat, symmetrize};
use crate::trials::{Trial, TrialSet};

/// A `p×p` matrix of independent standard normals.
pub fn gaussian(rows: usize, cols: usize, rng: &mut Rng) -> Mat {
    Mat::from_fn(rows, cols, |_, _| rng.normal())
}

/// A random orthogonal matrix (QR of a Gaussian matrix, signs fixed so the
/// distribution is Haar; Mezzadri 2007, Notices AMS).
pub fn random_orthogonal(p: usize, rng: &mut Rng) -> Mat {
    let qr = gaussian(p, p, rng).qr();
    let (mut q, r) = (qr.q(), qr.r());
    for j in 0..p {
        if r[(j, j)] < 0.0 {
            q.column_mut(j).neg_mut();
        }
    }
    q
}

/// A random SPD matrix with condition number `cond`: random eigenvectors and
/// eigenvalues log-uniformly spaced on `[1/sqrt(cond), sqrt(cond)]`, shuffled
/// by a random log-normal scale.
pub fn random_spd(p: usize, cond: f64, rng: &mut Rng) -> Mat {
    let q = random_orthogonal(p, rng);
    let scale = (0.5 * rng.normal()).exp();
    let d: Vec<f64> = (0..p)
        .map(|k| {
            let t = if p == 1 {
                0.5
            } else {
                k as f64 / (p - 1) as f64
            };
            scale * cond.powf(t - 0.5)
        })
        .collect();
    symmetrize(&(&q * Mat::from_diagonal(&nalgebra::DVector::from_vec(d)) * q.transpose()))
}

/// Sample covariance of `t` zero-mean Gaussian samples with covariance `sigma`.
pub fn sample_covariance(sigma: &Mat, t: usize, rng: &mut Rng) -> Mat {
    let l = cholesky(sigma).expect("population covariance must be SPD");
    let x = &l * gaussian(sigma.nrows(), t, rng);
    symmetrize(&(&x * x.transpose() / t as f64))
}

/// Observed channel lists: a fraction `frac` of trials loses between 1 and
/// `max_lost` channels chosen uniformly; the rest are complete.
pub fn random_dropout(
    n: usize,
    p: usize,
    frac: f64,
    max_lost: usize,
    rng: &mut Rng,
) -> Vec<Vec<usize>> {
    (0..n)
        .map(|_| {
            let mut obs: Vec<usize> = (0..p).collect();
            if rng.uniform() < frac {
                let lost = 1 + rng.below(max_lost.min(p - 1));
                for _ in 0..lost {
                    let k = rng.below(obs.len());
                    obs.remove(k);
                }
            }
            obs
        })
        .collect()
}

/// Cuts full matrices down to their observed blocks and builds a trial set.
pub fn masked_set(full: &[Mat], observed: Vec<Vec<usize>>) -> TrialSet {
    let p = full[0].nrows();
    let trials = full
        .iter()
        .zip(observed)
        .map(|(m, o)| {
            let block = crate::spd::sub_block(m, &o);
            Trial { observed: o, block }
        })
        .collect();
    TrialSet::new(
        crate::trials::default_channel_names(p),
        trials,
        None,
        "simulated",
    )
    .expect("simulated trials are valid")
}

/// A hard masked set with rarely observed channels: `n` sample covariances
/// of `t` samples each from one population of condition number `cond`,
/// every trial scaled by its own gain (log-normal, σ = 0.3: electrode gain
/// drift), every trial missing 1 to 6 channels, and each `(channel, k)` of
/// `rare` observed in only `k` trials (spread evenly over the set).
pub fn rare_channel_set(
    n: usize,
    p: usize,
    t: usize,
    cond: f64,
    rare: &[(usize, usize)],
    seed: u64,
) -> TrialSet {
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, cond, &mut rng);
    let full: Vec<Mat> = (0..n)
        .map(|_| {
            let gain = (0.3 * rng.normal()).exp();
            sample_covariance(&sigma, t, &mut rng) * gain
        })
        .collect();
    let mut observed = random_dropout(n, p, 1.0, 6, &mut rng);
    for &(c, k) in rare {
        let keep: Vec<usize> = (0..k.min(n)).map(|j| j * n / k.max(1)).collect();
        for (i, obs) in observed.iter_mut().enumerate() {
            let has = obs.contains(&c);
            if keep.contains(&i) {
                if !has {
                    obs.push(c);
                    obs.sort_unstable();
                }
            } else if has && obs.len() > 2 {
                obs.retain(|&x| x != c);
            }
        }
    }
    masked_set(&full, observed)
}

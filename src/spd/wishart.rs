//! The short-window scale bias of Riemannian means.
//!
//! A sample covariance with `n` degrees of freedom is `C = W / n`, `W`
//! Wishart with `n` degrees of freedom and scale `Σ` (`k×k`). Its expected
//! log-determinant is (Muirhead 1982, *Aspects of Multivariate Statistical
//! Theory*, Thm 3.2.15, from the Bartlett decomposition)
//!
//! `E ln det C = ln det Σ + Σ_{j=1}^{k} ψ((n − j + 1)/2) + k ln 2 − k ln n`,
//!
//! `ψ` the digamma function. Whitened by `Σ`, the law of `C` is invariant
//! under rotations, so the affine-invariant (Karcher) mean of many such `C`
//! converges to a multiple `s Σ`; the mean's determinant identity
//! (`ln det` of the Karcher mean is the mean `ln det`) gives `ln s = c(k, n)`,
//!
//! `c(k, n) = (1/k) Σ_{j=1}^{k} ψ((n − j + 1)/2) + ln 2 − ln n  (< 0)`.
//!
//! Dividing every block by `e^{c(k_i, n)}` removes the bias in expectation for
//! Gaussian, independent samples. Checked against scipy's digamma and a numpy
//! Monte Carlo of Wishart draws (tests/reference/make_wishart_fixtures.py).

/// Digamma `ψ(x)` for `x > 0`: the recurrence `ψ(x) = ψ(x+1) − 1/x` up to
/// `x ≥ 10`, then the asymptotic series `ln x − 1/(2x) − Σ B_{2m}/(2m x^{2m})`
/// (Abramowitz & Stegun 1964, 6.3.5 and 6.3.18), accurate to ~1e-15.
pub fn digamma(x: f64) -> f64 {
    if !(x > 0.0) || !x.is_finite() {
        return f64::NAN;
    }
    let mut x = x;
    let mut acc = 0.0;
    while x < 10.0 {
        acc -= 1.0 / x;
        x += 1.0;
    }
    let inv2 = 1.0 / (x * x);
    // Bernoulli terms B2/2 = 1/12, B4/4 = −1/120, B6/6 = 1/252, B8/8 = −1/240,
    // B10/10 = 1/132, B12/12 = −691/32760.
    let series = inv2
        * (1.0 / 12.0
            - inv2
                * (1.0 / 120.0
                    - inv2
                        * (1.0 / 252.0
                            - inv2
                                * (1.0 / 240.0 - inv2 * (1.0 / 132.0 - inv2 * 691.0 / 32760.0)))));
    acc + x.ln() - 0.5 / x - series
}

/// `c(k, n)`: the log of the factor by which the Riemannian mean of sample
/// covariances of `k` channels with `n` degrees of freedom shrinks the
/// population covariance. `None` unless `n > k − 1` (otherwise the blocks
/// are singular and the mean is undefined).
pub fn log_scale_bias(k: usize, n: f64) -> Option<f64> {
    if k == 0 || !(n > (k - 1) as f64) || !n.is_finite() {
        return None;
    }
    let s: f64 = (1..=k).map(|j| digamma((n - j as f64 + 1.0) / 2.0)).sum();
    Some(s / k as f64 + std::f64::consts::LN_2 - n.ln())
}

#[cfg(test)]
mod tests {
    use super::*;

    // Closed forms (Abramowitz & Stegun 1964, 6.3.2–6.3.3, 6.3.5): ψ(1) = −γ,
    // ψ(1/2) = −γ − 2 ln 2, ψ(x+1) = ψ(x) + 1/x; γ = 0.57721566490153286 (from memory).
    #[test]
    fn digamma_closed_forms() {
        let g = 0.577_215_664_901_532_9;
        assert!((digamma(1.0) + g).abs() < 1e-14);
        assert!((digamma(0.5) + g + 2.0 * std::f64::consts::LN_2).abs() < 1e-14);
        for x in [0.1, 0.7, 3.3, 12.5, 140.0] {
            assert!((digamma(x + 1.0) - digamma(x) - 1.0 / x).abs() < 1e-13);
        }
        assert!(log_scale_bias(4, 3.0).is_none());
        assert!(log_scale_bias(4, 3.5).unwrap() < 0.0);
    }
}

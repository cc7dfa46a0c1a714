//! Order-independent sums of floating-point values across processes.
//!
//! Floating-point addition is not associative, so a sum over trials split
//! differently between processes rounds differently. Here every value is
//! first rounded once to a fixed-point integer, `round(v · 2^s)` with one
//! scale exponent `s` for the whole vector, and the integers are added —
//! integer addition is associative, so any split and any order give the
//! same total, bit for bit. With `|total| < 2^(126 − s)` nothing overflows;
//! the rounding of each value is at most `2^−(s+1)`.
//!
//! Across processes the 128-bit integers travel as three 42-bit limbs in
//! 64-bit words, summed element-wise (MPI_SUM); up to 2^20 processes cannot
//! overflow a limb, and the carries are resolved after the sum.

use super::Collective;
use crate::error::{LacunaError, Result};

const LIMB: u32 = 42;
const MASK: i128 = (1i128 << LIMB) - 1;
/// Totals must stay below 2^LIMIT_BITS in magnitude.
const LIMIT_BITS: i32 = 120;

/// A vector of fixed-point accumulators with one scale exponent.
#[derive(Debug, Clone)]
pub struct ExactSum {
    scale: i32,
    acc: Vec<i128>,
}

impl ExactSum {
    /// `len` accumulators holding values whose totals stay below
    /// `2^magnitude_bits` in magnitude: `s = 120 − magnitude_bits`.
    pub fn new(len: usize, magnitude_bits: i32) -> Self {
        ExactSum {
            scale: LIMIT_BITS - magnitude_bits,
            acc: vec![0; len],
        }
    }

    /// Scale exponent for values bounded by `bound` in magnitude (with 4
    /// bits of headroom for partial totals).
    pub fn magnitude_bits(bound: f64) -> i32 {
        if bound > 0.0 && bound.is_finite() {
            bound.log2().ceil() as i32 + 4
        } else {
            4
        }
    }

    fn fixed(scale: i32, v: f64) -> Option<i128> {
        if !v.is_finite() {
            return None;
        }
        // Multiplying by a power of two is exact (barring underflow, which
        // only loses what is below the resolution anyway).
        let scaled = v * 2f64.powi(scale);
        if scaled.abs() >= 2f64.powi(LIMIT_BITS) {
            return None;
        }
        Some(scaled.round() as i128)
    }

    /// Adds `values` element-wise; Err when one is not finite or out of range.
    pub fn add(&mut self, values: &[f64]) -> Result<()> {
        assert_eq!(values.len(), self.acc.len(), "ExactSum::add: length");
        let scale = self.scale;
        for (a, &v) in self.acc.iter_mut().zip(values) {
            let f = Self::fixed(scale, v).ok_or_else(|| {
                LacunaError::Numerical(format!(
                    "a partial sum ({v:e}) is outside the exact-sum range (2^{} at scale 2^{scale})",
                    LIMIT_BITS - scale
                ))
            })?;
            *a = a.checked_add(f).ok_or_else(|| {
                LacunaError::Numerical("an exact sum overflowed its range".into())
            })?;
        }
        Ok(())
    }

    /// The totals as floating-point numbers (one rounding each).
    pub fn values(&self) -> Vec<f64> {
        let inv = 2f64.powi(-self.scale);
        self.acc.iter().map(|&a| a as f64 * inv).collect()
    }

    /// Sums the accumulators of every process (identical on all of them).
    pub fn all_reduce(&mut self, world: &dyn Collective) -> Result<()> {
        if world.size() == 1 {
            return Ok(());
        }
        let mut limbs: Vec<i64> = Vec::with_capacity(3 * self.acc.len());
        for &a in &self.acc {
            limbs.push((a & MASK) as i64);
            limbs.push(((a >> LIMB) & MASK) as i64);
            limbs.push((a >> (2 * LIMB)) as i64);
        }
        world.sum_i64(&mut limbs);
        for (a, l) in self.acc.iter_mut().zip(limbs.chunks_exact(3)) {
            let v = (l[0] as i128)
                .checked_add((l[1] as i128) << LIMB)
                .and_then(|v| v.checked_add((l[2] as i128) << (2 * LIMB)));
            *a = v.ok_or_else(|| {
                LacunaError::Numerical("an exact sum across processes overflowed".into())
            })?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::distributed::Local;

    // Common practice, no source: the fixed-point total does not depend on
    // the order or grouping of the terms, while the floating-point sum does.
    #[test]
    fn totals_do_not_depend_on_order_or_grouping() {
        let mut rng = crate::simulate::rng::Rng::new(4);
        let v: Vec<f64> = (0..2000)
            .map(|i| rng.normal() * 10f64.powi((i % 7) - 3))
            .collect();
        let total = |order: &[usize], groups: usize| {
            let mut parts: Vec<ExactSum> = (0..groups).map(|_| ExactSum::new(1, 20)).collect();
            for (k, &i) in order.iter().enumerate() {
                parts[k % groups].add(&[v[i]]).unwrap();
            }
            let mut acc = 0i128;
            for p in &parts {
                acc += p.acc[0];
            }
            acc
        };
        let forward: Vec<usize> = (0..v.len()).collect();
        let backward: Vec<usize> = (0..v.len()).rev().collect();
        assert_eq!(total(&forward, 1), total(&backward, 3));
        assert_eq!(total(&forward, 2), total(&backward, 7));
        let fsum: f64 = v.iter().sum();
        let bsum: f64 = v.iter().rev().sum();
        let mut e = ExactSum::new(1, 20);
        e.add(&[fsum]).unwrap();
        // The exact total is close to either floating-point sum.
        let exact = total(&forward, 1) as f64 * 2f64.powi(-100);
        assert!((exact - fsum).abs() < 1e-9 && (exact - bsum).abs() < 1e-9);
    }

    // Limbs survive negative values and a round trip through one process.
    #[test]
    fn limbs_round_trip() {
        let mut e = ExactSum::new(4, 30);
        e.add(&[-1.5e8, 3.25, -7.0e-20, 0.0]).unwrap();
        let before = e.acc.clone();
        // One process: nothing to reduce.
        e.all_reduce(&Local).unwrap();
        assert_eq!(e.acc, before);
        for &a in &before {
            let l0 = a & MASK;
            let l1 = (a >> LIMB) & MASK;
            let l2 = a >> (2 * LIMB);
            assert_eq!(l0 + (l1 << LIMB) + (l2 << (2 * LIMB)), a);
        }
        assert_eq!(e.values()[1], 3.25);
        assert!(e.add(&[f64::NAN, 0.0, 0.0, 0.0]).is_err());
        assert!(e.add(&[1e30, 0.0, 0.0, 0.0]).is_err());
    }
}

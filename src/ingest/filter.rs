//! Butterworth filters in second-order sections, applied forward–backward.
//!
//! Design follows the textbook route (analog prototype poles, frequency
//! prewarping, low-pass→band-pass transform, bilinear transform), the same
//! route scipy.signal.butter takes, so our zero-phase output can be checked
//! against scipy.signal.sosfiltfilt fixtures. Sections pair one conjugate
//! pole pair with its zeros; the gain sits in the first section. The pairing
//! differs from scipy's, which changes rounding only: the cascade's transfer
//! function is the same.
//!
//! Zero-phase filtering copies sosfiltfilt's conventions exactly: odd
//! extension of 3·(2·sections + 1) samples at each end, steady-state initial
//! conditions scaled by the first sample, forward pass, backward pass.

use crate::error::{LacunaError, Result};

/// One biquad: b0 b1 b2 / 1 a1 a2 (a0 normalised to 1).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Section {
    pub b: [f64; 3],
    pub a: [f64; 3],
}

/// A cascade of second-order sections.
#[derive(Debug, Clone, PartialEq)]
pub struct Sos {
    pub sections: Vec<Section>,
}

/// Complex arithmetic, just what the design needs.
#[derive(Debug, Clone, Copy, PartialEq)]
struct C(f64, f64);
impl C {
    fn add(self, o: C) -> C {
        C(self.0 + o.0, self.1 + o.1)
    }
    fn sub(self, o: C) -> C {
        C(self.0 - o.0, self.1 - o.1)
    }
    fn mul(self, o: C) -> C {
        C(self.0 * o.0 - self.1 * o.1, self.0 * o.1 + self.1 * o.0)
    }
    fn div(self, o: C) -> C {
        let d = o.0 * o.0 + o.1 * o.1;
        C(
            (self.0 * o.0 + self.1 * o.1) / d,
            (self.1 * o.0 - self.0 * o.1) / d,
        )
    }
    fn scale(self, s: f64) -> C {
        C(self.0 * s, self.1 * s)
    }
    fn sqrt(self) -> C {
        let r = (self.0 * self.0 + self.1 * self.1).sqrt();
        let re = ((r + self.0) / 2.0).max(0.0).sqrt();
        let im = ((r - self.0) / 2.0).max(0.0).sqrt();
        C(re, if self.1 < 0.0 { -im } else { im })
    }
}

/// Which response to design.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Band {
    Lowpass(f64),
    Highpass(f64),
    Bandpass(f64, f64),
}

/// Designs a digital Butterworth filter of prototype order `order` at
/// sampling rate `fs` (Hz). Band edges must lie strictly inside (0, fs/2).
pub fn butterworth(order: usize, band: Band, fs: f64) -> Result<Sos> {
    let nyq = fs / 2.0;
    let edges: Vec<f64> = match band {
        Band::Lowpass(f) | Band::Highpass(f) => vec![f],
        Band::Bandpass(lo, hi) => {
            if !(lo < hi) {
                return Err(LacunaError::InvalidOption(format!(
                    "band {lo}–{hi} Hz: the low edge must be below the high edge"
                )));
            }
            vec![lo, hi]
        }
    };
    for &f in &edges {
        if !(f > 0.0 && f < nyq) {
            return Err(LacunaError::InvalidOption(format!(
                "filter edge {f} Hz must lie strictly between 0 and the Nyquist frequency {nyq} Hz (sampling rate {fs} Hz)"
            )));
        }
    }
    if order == 0 || order > 12 {
        return Err(LacunaError::InvalidOption(format!(
            "filter order {order} must be between 1 and 12"
        )));
    }
    // Analog prototype poles on the unit circle's left half, prewarped edges
    // for the bilinear transform at fs' = 2 (the normalised convention).
    let n = order as f64;
    let proto: Vec<C> = (0..order)
        .map(|k| {
            let theta = std::f64::consts::PI * (2.0 * k as f64 - n + 1.0) / (2.0 * n);
            C(-theta.cos(), -theta.sin())
        })
        .collect();
    let warp = |f: f64| 4.0 * (std::f64::consts::PI * (f / nyq) / 2.0).tan();
    let (poles, zeros, gain): (Vec<C>, Vec<C>, f64) = match band {
        Band::Lowpass(f) => {
            let w = warp(f);
            (
                proto.iter().map(|p| p.scale(w)).collect(),
                vec![],
                w.powi(order as i32),
            )
        }
        Band::Highpass(f) => {
            let w = warp(f);
            // s → w/s: poles w/p, zeros at the origin; gain real(prod(-p))⁻¹·1.
            let poles: Vec<C> = proto.iter().map(|p| C(w, 0.0).div(*p)).collect();
            let mut prod = C(1.0, 0.0);
            for p in &proto {
                prod = prod.mul(C(-p.0, -p.1));
            }
            (poles, vec![C(0.0, 0.0); order], 1.0 / prod.0)
        }
        Band::Bandpass(lo, hi) => {
            let (w1, w2) = (warp(lo), warp(hi));
            let bw = w2 - w1;
            let w0sq = w1 * w2;
            let mut poles = Vec::with_capacity(2 * order);
            for p in &proto {
                let pl = p.scale(bw / 2.0);
                let root = pl.mul(pl).sub(C(w0sq, 0.0)).sqrt();
                poles.push(pl.add(root));
                poles.push(pl.sub(root));
            }
            (poles, vec![C(0.0, 0.0); order], bw.powi(order as i32))
        }
    };
    // Bilinear transform at fs' = 2: z = (4 + s)/(4 − s).
    let four = C(4.0, 0.0);
    let zp: Vec<C> = poles
        .iter()
        .map(|p| four.add(*p).div(four.sub(*p)))
        .collect();
    let mut zz: Vec<C> = zeros
        .iter()
        .map(|z| four.add(*z).div(four.sub(*z)))
        .collect();
    let mut num = C(1.0, 0.0);
    for z in &zeros {
        num = num.mul(four.sub(*z));
    }
    let mut den = C(1.0, 0.0);
    for p in &poles {
        den = den.mul(four.sub(*p));
    }
    let k = gain * num.div(den).0;
    zz.resize(zp.len(), C(-1.0, 0.0));
    Ok(Sos {
        sections: pair_sections(&zp, &zz, k),
    })
}

/// Groups poles into conjugate pairs (real poles paired together) and gives
/// each section two of the zeros (all zeros are real: ±1 here).
fn pair_sections(poles: &[C], zeros: &[C], gain: f64) -> Vec<Section> {
    let tol = 1e-12;
    let mut upper: Vec<C> = poles.iter().copied().filter(|p| p.1 > tol).collect();
    let mut real: Vec<f64> = poles
        .iter()
        .filter(|p| p.1.abs() <= tol)
        .map(|p| p.0)
        .collect();
    upper.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.total_cmp(&b.1)));
    real.sort_by(f64::total_cmp);
    let mut zr: Vec<f64> = zeros.iter().map(|z| z.0).collect();
    zr.sort_by(f64::total_cmp);
    let mut sections = Vec::new();
    let mut take_zeros = |count: usize| -> [f64; 3] {
        // Alternate ends so band-pass sections get one zero at +1 and one at −1.
        let mut b = [1.0, 0.0, 0.0];
        for i in 0..count {
            let z = if i % 2 == 0 {
                zr.pop()
            } else if zr.is_empty() {
                None
            } else {
                Some(zr.remove(0))
            };
            if let Some(z) = z {
                // multiply (b0 + b1 x + b2 x²) by (1 − z x)
                b = [b[0], b[1] - z * b[0], b[2] - z * b[1]];
            }
        }
        b
    };
    for p in &upper {
        let a = [1.0, -2.0 * p.0, p.0 * p.0 + p.1 * p.1];
        sections.push(Section {
            b: take_zeros(2),
            a,
        });
    }
    for pair in real.chunks(2) {
        let a = if pair.len() == 2 {
            [1.0, -(pair[0] + pair[1]), pair[0] * pair[1]]
        } else {
            [1.0, -pair[0], 0.0]
        };
        sections.push(Section {
            b: take_zeros(pair.len()),
            a,
        });
    }
    if let Some(first) = sections.first_mut() {
        for v in &mut first.b {
            *v *= gain;
        }
    }
    sections
}

impl Sos {
    /// Edge padding used by [`Sos::filtfilt`] (sosfiltfilt's default rule).
    pub fn padlen(&self) -> usize {
        let zb = self.sections.iter().filter(|s| s.b[2] == 0.0).count();
        let za = self.sections.iter().filter(|s| s.a[2] == 0.0).count();
        3 * (2 * self.sections.len() + 1 - zb.min(za))
    }

    /// Steady-state initial conditions for a unit step (sosfilt_zi).
    fn zi(&self) -> Vec<[f64; 2]> {
        let mut scale = 1.0;
        self.sections
            .iter()
            .map(|s| {
                let ([b0, b1, b2], [_, a1, a2]) = (s.b, s.a);
                // (I − Aᵀ) z = B with A the companion matrix of a.
                let (r0, r1) = (b1 - a1 * b0, b2 - a2 * b0);
                let det = (1.0 + a1) + a2;
                let z0 = (r0 + r1) / det;
                let z1 = r1 - a2 * z0;
                let z = [scale * z0, scale * z1];
                scale *= (b0 + b1 + b2) / (1.0 + a1 + a2);
                z
            })
            .collect()
    }

    /// Filters `x` in place, one pass, transposed direct form II, starting
    /// from state `zi` scaled by `x0`. All sections advance together, sample
    /// by sample: each section's recursion is a chain of dependent
    /// multiply-adds, and interleaving the sections lets the processor
    /// overlap those chains (about n_sections times faster than filtering
    /// section after section; the arithmetic, and so the result, is identical).
    fn pass(&self, x: &mut [f64], zi: &[[f64; 2]], x0: f64) {
        match self.sections.len() {
            1 => self.pass_fused::<1>(x, zi, x0),
            2 => self.pass_fused::<2>(x, zi, x0),
            3 => self.pass_fused::<3>(x, zi, x0),
            4 => self.pass_fused::<4>(x, zi, x0),
            5 => self.pass_fused::<5>(x, zi, x0),
            6 => self.pass_fused::<6>(x, zi, x0),
            _ => {
                for (s, z) in self.sections.iter().zip(zi) {
                    let ([b0, b1, b2], [_, a1, a2]) = (s.b, s.a);
                    let (mut z0, mut z1) = (z[0] * x0, z[1] * x0);
                    for v in x.iter_mut() {
                        let xin = *v;
                        let y = b0 * xin + z0;
                        z0 = b1 * xin - a1 * y + z1;
                        z1 = b2 * xin - a2 * y;
                        *v = y;
                    }
                }
            }
        }
    }

    fn pass_fused<const N: usize>(&self, x: &mut [f64], zi: &[[f64; 2]], x0: f64) {
        let mut c = [[0.0; 5]; N];
        let mut z = [[0.0; 2]; N];
        for k in 0..N {
            let s = &self.sections[k];
            c[k] = [s.b[0], s.b[1], s.b[2], s.a[1], s.a[2]];
            z[k] = [zi[k][0] * x0, zi[k][1] * x0];
        }
        for v in x.iter_mut() {
            let mut xin = *v;
            for k in 0..N {
                let [b0, b1, b2, a1, a2] = c[k];
                let y = b0 * xin + z[k][0];
                z[k][0] = b1 * xin - a1 * y + z[k][1];
                z[k][1] = b2 * xin - a2 * y;
                xin = y;
            }
            *v = xin;
        }
    }

    /// Zero-phase filtering with sosfiltfilt's conventions (odd extension,
    /// steady-state initial conditions). `work` is scratch space reused
    /// between calls. Fails when the signal is not longer than the padding.
    pub fn filtfilt(&self, x: &mut [f64], work: &mut Vec<f64>) -> Result<()> {
        let n = x.len();
        let pad = self.padlen();
        if n <= pad {
            return Err(LacunaError::InvalidOption(format!(
                "a segment of {n} samples is too short to filter: the filter needs more than {pad} (use a longer window or a lower filter order)"
            )));
        }
        work.clear();
        work.reserve(n + 2 * pad);
        let (first, last) = (x[0], x[n - 1]);
        work.extend((1..=pad).rev().map(|i| 2.0 * first - x[i]));
        work.extend_from_slice(x);
        work.extend((1..=pad).map(|i| 2.0 * last - x[n - 1 - i]));
        let zi = self.zi();
        let x0 = work[0];
        self.pass(work, &zi, x0);
        work.reverse();
        let y0 = work[0];
        self.pass(work, &zi, y0);
        work.reverse();
        x.copy_from_slice(&work[pad..pad + n]);
        Ok(())
    }

    /// Causal filtering (one forward pass from rest), for simulation.
    pub fn filter_causal(&self, x: &mut [f64]) {
        let zero = vec![[0.0, 0.0]; self.sections.len()];
        self.pass(x, &zero, 0.0);
    }

    /// Number of samples after which the impulse response stays below
    /// `rel` of its peak: the margin a segment needs so that cutting the
    /// signal there changes the filtered segment by at most about `rel`.
    pub fn settling_samples(&self, rel: f64, cap: usize) -> usize {
        let mut h = vec![0.0; cap];
        h[0] = 1.0;
        let zero = vec![[0.0, 0.0]; self.sections.len()];
        self.pass(&mut h, &zero, 0.0);
        let peak = h.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        h.iter()
            .rposition(|v| v.abs() > rel * peak)
            .map_or(0, |i| i + 1)
    }

    /// Magnitude of the frequency response at `f` Hz (sampling rate `fs`).
    pub fn response(&self, f: f64, fs: f64) -> f64 {
        let w = 2.0 * std::f64::consts::PI * f / fs;
        let z1 = C(w.cos(), -w.sin());
        let z2 = z1.mul(z1);
        let mut h = C(1.0, 0.0);
        for s in &self.sections {
            let num = C(s.b[0], 0.0).add(z1.scale(s.b[1])).add(z2.scale(s.b[2]));
            let den = C(1.0, 0.0).add(z1.scale(s.a[1])).add(z2.scale(s.a[2]));
            h = h.mul(num.div(den));
        }
        (h.0 * h.0 + h.1 * h.1).sqrt()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Butterworth magnitude: |H| = 1/√2 at the edges and ≈ 1 mid-band
    // (textbook property of the Butterworth design, from memory).
    #[test]
    fn butterworth_edges_at_half_power() {
        let fs = 256.0;
        let bp = butterworth(4, Band::Bandpass(8.0, 30.0), fs).unwrap();
        assert!((bp.response(8.0, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
        assert!((bp.response(30.0, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
        assert!((bp.response((8.0f64 * 30.0).sqrt().atan().tan(), fs) - 1.0).abs() < 1e-2);
        let lp = butterworth(5, Band::Lowpass(50.0), fs).unwrap();
        assert!((lp.response(50.0, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
        assert!((lp.response(0.0, fs) - 1.0).abs() < 1e-12);
        let hp = butterworth(4, Band::Highpass(1.0), fs).unwrap();
        assert!((hp.response(1.0, fs) - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-9);
        assert!((hp.response(64.0, fs) - 1.0).abs() < 1e-9);
    }

    #[test]
    fn bad_bands_are_refused() {
        assert!(butterworth(4, Band::Bandpass(8.0, 130.0), 256.0).is_err());
        assert!(butterworth(4, Band::Bandpass(30.0, 8.0), 256.0).is_err());
        assert!(butterworth(4, Band::Lowpass(0.0), 256.0).is_err());
        let sos = butterworth(4, Band::Bandpass(8.0, 30.0), 256.0).unwrap();
        let mut short = vec![0.0; sos.padlen()];
        assert!(sos.filtfilt(&mut short, &mut Vec::new()).is_err());
    }
}

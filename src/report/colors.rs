//! Colour maps for the report, interpolated in CIELAB so that equal steps in
//! value are roughly equal steps in perceived colour (CIE 1976 L*a*b*, D65
//! white, sRGB primaries; the conversion formulas are the standard ones).
//!
//! - diverging (covariances, differences): a cool blue through a light
//!   neutral to a warm red, lightness symmetric about the centre;
//! - sequential (counts): from pale sand to deep teal, lightness falling
//!   steadily.
//!
//! Our own choice of endpoints. Colour never carries meaning alone in the
//! report: every cell also has a tooltip with its value, and masks carry
//! letters.

fn srgb_to_linear(c: f64) -> f64 {
    if c <= 0.04045 {
        c / 12.92
    } else {
        ((c + 0.055) / 1.055).powf(2.4)
    }
}

fn linear_to_srgb(c: f64) -> f64 {
    let c = c.clamp(0.0, 1.0);
    if c <= 0.003_130_8 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    }
}

const WHITE: [f64; 3] = [0.950_47, 1.0, 1.088_83];

fn lab_f(t: f64) -> f64 {
    let d = 6.0 / 29.0;
    if t > d * d * d {
        t.cbrt()
    } else {
        t / (3.0 * d * d) + 4.0 / 29.0
    }
}

fn lab_finv(t: f64) -> f64 {
    let d = 6.0 / 29.0;
    if t > d {
        t * t * t
    } else {
        3.0 * d * d * (t - 4.0 / 29.0)
    }
}

/// sRGB (0–255) to L*a*b*.
pub fn rgb_to_lab(rgb: [u8; 3]) -> [f64; 3] {
    let [r, g, b] = rgb.map(|v| srgb_to_linear(v as f64 / 255.0));
    let x = 0.412_456_4 * r + 0.357_576_1 * g + 0.180_437_5 * b;
    let y = 0.212_672_9 * r + 0.715_152_2 * g + 0.072_175 * b;
    let z = 0.019_333_9 * r + 0.119_192 * g + 0.950_304_1 * b;
    let (fx, fy, fz) = (
        lab_f(x / WHITE[0]),
        lab_f(y / WHITE[1]),
        lab_f(z / WHITE[2]),
    );
    [116.0 * fy - 16.0, 500.0 * (fx - fy), 200.0 * (fy - fz)]
}

/// L*a*b* to sRGB (0–255), clipped to the gamut.
pub fn lab_to_rgb(lab: [f64; 3]) -> [u8; 3] {
    let fy = (lab[0] + 16.0) / 116.0;
    let fx = fy + lab[1] / 500.0;
    let fz = fy - lab[2] / 200.0;
    let (x, y, z) = (
        WHITE[0] * lab_finv(fx),
        WHITE[1] * lab_finv(fy),
        WHITE[2] * lab_finv(fz),
    );
    let r = 3.240_454_2 * x - 1.537_138_5 * y - 0.498_531_4 * z;
    let g = -0.969_266 * x + 1.876_010_8 * y + 0.041_556 * z;
    let b = 0.055_643_4 * x - 0.204_025_9 * y + 1.057_225_2 * z;
    [r, g, b].map(|c| (linear_to_srgb(c) * 255.0).round() as u8)
}

fn mix(stops: &[[u8; 3]], t: f64) -> String {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.5
    };
    let k = stops.len() - 1;
    let pos = t * k as f64;
    let i = (pos.floor() as usize).min(k - 1);
    let f = pos - i as f64;
    let (a, b) = (rgb_to_lab(stops[i]), rgb_to_lab(stops[i + 1]));
    let lab = [0, 1, 2].map(|j| a[j] + f * (b[j] - a[j]));
    let [r, g, bl] = lab_to_rgb(lab);
    format!("#{r:02x}{g:02x}{bl:02x}")
}

const DIVERGING: [[u8; 3]; 3] = [[43, 92, 170], [242, 240, 235], [178, 45, 48]];
const SEQUENTIAL: [[u8; 3]; 3] = [[247, 239, 214], [96, 168, 160], [14, 62, 82]];

/// Diverging colour for `v` on the symmetric scale [−m, m].
pub fn diverging(v: f64, m: f64) -> String {
    let t = if m > 0.0 { 0.5 + 0.5 * v / m } else { 0.5 };
    mix(&DIVERGING, t)
}

/// Sequential colour for `v` on [0, m].
pub fn sequential(v: f64, m: f64) -> String {
    mix(&SEQUENTIAL, if m > 0.0 { v / m } else { 0.0 })
}

#[cfg(test)]
mod tests {
    use super::*;

    // Round trip sRGB → Lab → sRGB, and D65 white at L* = 100 (CIE 1976
    // definitions, from memory: L* of white is 100, a* = b* = 0).
    #[test]
    fn lab_round_trip() {
        for c in [
            [0, 0, 0],
            [255, 255, 255],
            [43, 92, 170],
            [178, 45, 48],
            [14, 62, 82],
        ] {
            assert_eq!(lab_to_rgb(rgb_to_lab(c)), c);
        }
        let w = rgb_to_lab([255, 255, 255]);
        assert!((w[0] - 100.0).abs() < 1e-3 && w[1].abs() < 1e-2 && w[2].abs() < 1e-2);
        // The sequential map gets darker monotonically.
        let l: Vec<f64> = (0..=10)
            .map(|k| {
                let h = sequential(k as f64, 10.0);
                let p = |i: usize| u8::from_str_radix(&h[i..i + 2], 16).unwrap();
                rgb_to_lab([p(1), p(3), p(5)])[0]
            })
            .collect();
        assert!(l.windows(2).all(|w| w[1] < w[0]));
    }
}

//! Standard electrode positions of the 10-20 and 10-10 systems on a unit
//! sphere, computed from the systems' definition (Jasper 1958, Electroenceph.
//! Clin. Neurophysiol. 10; Chatrian, Lettich & Nelson 1985, Am. J. EEG
//! Technol. 25; the row construction follows Oostenveld & Praamstra 2001,
//! Clin. Neurophysiol. 112), not copied from any table.
//!
//! Coordinates: x towards the right preauricular point, y towards the
//! nasion, z towards the vertex; the nasion, both preauricular points and
//! the inion lie on the equator z = 0, and Cz is (0, 0, 1).
//! - Midline: the nasion–inion arc (180°) in steps of 10 %: Nz 0 %, Fpz 10 %,
//!   AFz 20 %, Fz 30 %, FCz 40 %, Cz 50 %, CPz 60 %, Pz 70 %, POz 80 %,
//!   Oz 90 %, Iz 100 %.
//! - Circumference: the circle through Fpz, T7 and Oz (10 % above the
//!   equator, elevation 18°), in steps of 5 % of its length (18° of azimuth)
//!   from Fpz: Fp1/Fp2, AF7/AF8, F7/F8, FT7/FT8, T7/T8, TP7/TP8, P7/P8,
//!   PO7/PO8, O1/O2 (left odd, right even).
//! - Rows: the electrodes of a row (e.g. F7, F5, F3, F1, Fz, F2, …, F8)
//!   divide the circle through the row's two circumference points and its
//!   midline point into equal arcs (four per side). On the central row that
//!   circle is the coronal arc, so C3 lies at 30 % of it as the 10-20 rule says.
//! - 9/10 (F9, FT9, T9, TP9, P9, PO9 and their right twins): on the equator
//!   at the azimuth of the row's 7/8 electrode (10 % below the circumference).
//!
//! Older names are accepted for the same places: T3 = T7, T4 = T8, T5 = P7,
//! T6 = P8. Names match case-insensitively.

use std::f64::consts::PI;

use crate::{LacunaError, Result};

/// Which set of names is accepted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum System {
    /// The 21 electrodes of the 10-20 system (Fp1, Fpz, …, O2).
    TenTwenty,
    /// The 10-10 system (all rows, 1–10 and z).
    TenTen,
}

impl System {
    /// The system named `10-20` or `10-10`, if `name` is one.
    pub fn from_name(name: &str) -> Option<System> {
        match name {
            "10-20" => Some(System::TenTwenty),
            "10-10" => Some(System::TenTen),
            _ => None,
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            System::TenTwenty => "10-20",
            System::TenTen => "10-10",
        }
    }
}

/// The 10-20 names (current spelling).
const TEN_TWENTY: [&str; 21] = [
    "Fp1", "Fpz", "Fp2", "F7", "F3", "Fz", "F4", "F8", "T7", "C3", "Cz", "C4", "T8", "P7", "P3",
    "Pz", "P4", "P8", "O1", "Oz", "O2",
];

/// Rows with interior electrodes: (interior prefix, prefix at 7/8/9/10,
/// step along the midline and the circumference, 1..=8).
const ROWS: [(&str, &str, usize); 7] = [
    ("AF", "AF", 2),
    ("F", "F", 3),
    ("FC", "FT", 4),
    ("C", "T", 5),
    ("CP", "TP", 6),
    ("P", "P", 7),
    ("PO", "PO", 8),
];

/// Elevation of the circumference: 10 % of the nasion–inion arc.
const CIRCUMFERENCE_ELEVATION: f64 = 0.1 * PI;

fn midline(fraction: f64) -> [f64; 3] {
    let a = fraction * PI;
    [0.0, a.cos(), a.sin()]
}

/// A point on the circle `elevation` above the equator, `from_front`
/// radians of azimuth from the front, on the left (x < 0) or right.
fn on_circle(elevation: f64, from_front: f64, left: bool) -> [f64; 3] {
    let r = elevation.cos();
    let x = r * from_front.sin();
    [
        if left { -x } else { x },
        r * from_front.cos(),
        elevation.sin(),
    ]
}

/// Azimuth from the front of the circumference point of `step` (1..=9).
fn circumference_azimuth(step: usize) -> f64 {
    step as f64 * 0.1 * PI
}

fn sub(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] - b[0], a[1] - b[1], a[2] - b[2]]
}
fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}
fn cross(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [
        a[1] * b[2] - a[2] * b[1],
        a[2] * b[0] - a[0] * b[2],
        a[0] * b[1] - a[1] * b[0],
    ]
}
fn scale(a: [f64; 3], s: f64) -> [f64; 3] {
    [a[0] * s, a[1] * s, a[2] * s]
}
fn add(a: [f64; 3], b: [f64; 3]) -> [f64; 3] {
    [a[0] + b[0], a[1] + b[1], a[2] + b[2]]
}
fn unit(a: [f64; 3]) -> [f64; 3] {
    scale(a, 1.0 / dot(a, a).sqrt())
}

/// The point `t` of the way from `m` to `l` along the circle through `l`,
/// `m` and `r` (all on the unit sphere; the circle is the sphere cut by
/// their plane).
fn along_row(l: [f64; 3], m: [f64; 3], r: [f64; 3], t: f64) -> [f64; 3] {
    let n = unit(cross(sub(l, m), sub(r, m)));
    // The plane's distance from the origin; the circle's centre and radius.
    let d = dot(n, m);
    let centre = scale(n, d);
    let radius = (1.0 - d * d).sqrt();
    let u = unit(sub(m, centre));
    let v = cross(n, u);
    let lv = sub(l, centre);
    let angle = dot(lv, v).atan2(dot(lv, u));
    let a = t * angle;
    add(
        centre,
        add(scale(u, radius * a.cos()), scale(v, radius * a.sin())),
    )
}

/// The current spelling of an old name (T3 → T7, …), case-insensitively.
fn canonical(name: &str) -> String {
    let lower = name.trim().to_ascii_lowercase();
    match lower.as_str() {
        "t3" => "t7".into(),
        "t4" => "t8".into(),
        "t5" => "p7".into(),
        "t6" => "p8".into(),
        _ => lower,
    }
}

/// Position of a 10-10 electrode (any spelling case; old names accepted).
pub fn position(name: &str) -> Option<[f64; 3]> {
    let n = canonical(name);
    match n.as_str() {
        "nz" => return Some(midline(0.0)),
        "iz" => return Some(midline(1.0)),
        "fpz" => return Some(midline(0.1)),
        "oz" => return Some(midline(0.9)),
        "fp1" | "fp2" => {
            return Some(on_circle(
                CIRCUMFERENCE_ELEVATION,
                circumference_azimuth(1),
                n == "fp1",
            ));
        }
        "o1" | "o2" => {
            return Some(on_circle(
                CIRCUMFERENCE_ELEVATION,
                circumference_azimuth(9),
                n == "o1",
            ));
        }
        _ => {}
    }
    // Each row's prefixes: interior numbers (1–6, z) and outer ones
    // (7–10); AF, F, P and PO use one prefix for both. Longest first, so
    // FT is tried before F and PO before P.
    let mut prefixes: Vec<(&str, usize, bool, bool)> = Vec::new();
    for (inner, outer, step) in ROWS {
        if inner == outer {
            prefixes.push((inner, step, true, true));
        } else {
            prefixes.push((inner, step, true, false));
            prefixes.push((outer, step, false, true));
        }
    }
    prefixes.sort_by_key(|r| std::cmp::Reverse(r.0.len()));
    for (prefix, step, names_inner, names_outer) in prefixes {
        let Some(rest) = n.strip_prefix(&prefix.to_ascii_lowercase()) else {
            continue;
        };
        let mid = midline(step as f64 * 0.1);
        if rest == "z" {
            return names_inner.then_some(mid);
        }
        let Ok(k) = rest.parse::<usize>() else {
            continue;
        };
        let left = k % 2 == 1;
        let lateral = k.div_ceil(2); // 1..=5 from the midline
        let ok = match lateral {
            1..=3 => names_inner,
            4 | 5 => names_outer,
            _ => false,
        };
        if !ok {
            return None;
        }
        let l = on_circle(CIRCUMFERENCE_ELEVATION, circumference_azimuth(step), true);
        let r = on_circle(CIRCUMFERENCE_ELEVATION, circumference_azimuth(step), false);
        if lateral == 5 {
            return Some(on_circle(0.0, circumference_azimuth(step), left));
        }
        let q = along_row(l, mid, r, lateral as f64 / 4.0);
        return Some(if left { q } else { [-q[0], q[1], q[2]] });
    }
    None
}

/// Positions of `channels` in `system`, in order; an error lists every
/// channel that has no standard position there.
pub fn standard_positions(channels: &[String], system: System) -> Result<Vec<[f64; 3]>> {
    let mut out = Vec::with_capacity(channels.len());
    let mut missing = Vec::new();
    for c in channels {
        let allowed = match system {
            System::TenTen => true,
            System::TenTwenty => TEN_TWENTY
                .iter()
                .any(|n| n.to_ascii_lowercase() == canonical(c)),
        };
        match position(c).filter(|_| allowed) {
            Some(p) => out.push(p),
            None => missing.push(c.clone()),
        }
    }
    if missing.is_empty() {
        Ok(out)
    } else {
        Err(LacunaError::InvalidOption(format!(
            "{} channel(s) have no standard {} position: {}; give positions of your own (CSV channel,x,y,z){}",
            missing.len(),
            system.name(),
            missing.join(", "),
            if system == System::TenTwenty {
                ", or try the 10-10 system"
            } else {
                ""
            }
        )))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(name: &str) -> [f64; 3] {
        position(name).unwrap_or_else(|| panic!("{name}"))
    }
    fn dist(a: &str, b: &str) -> f64 {
        let d = sub(p(a), p(b));
        dot(d, d).sqrt()
    }
    fn close(a: [f64; 3], b: [f64; 3]) -> bool {
        (0..3).all(|k| (a[k] - b[k]).abs() < 1e-12)
    }
    const ALL: [&str; 19] = [
        "F7", "F5", "F3", "F1", "FT7", "FC5", "FC3", "FC1", "T7", "C5", "C3", "C1", "TP7", "CP3",
        "P7", "P3", "PO7", "PO3", "AF3",
    ];

    // Jasper 1958 / Chatrian et al. 1985: Cz is the vertex; every position
    // is on the unit sphere; old names are the same places.
    #[test]
    fn cz_is_the_vertex_and_all_on_the_sphere() {
        assert!(close(p("Cz"), [0.0, 0.0, 1.0]));
        for n in ALL
            .iter()
            .chain(&["Fpz", "Oz", "Nz", "Iz", "F9", "T10", "Fp1", "O2"])
        {
            let q = p(n);
            assert!((dot(q, q) - 1.0).abs() < 1e-12, "{n}");
        }
        assert!(close(p("T3"), p("T7")) && close(p("t6"), p("P8")));
        assert!(close(p("cz"), p("CZ")));
    }

    // The definition: Fpz and Oz on the midline at 10 % and 90 % of the
    // nasion–inion arc (18° above the equator, front and back); T7 at 10 %
    // of the coronal arc; C3 at 30 % (the 10-20 rule).
    #[test]
    fn midline_and_coronal_percentages() {
        let e = (18f64).to_radians();
        assert!(close(p("Fpz"), [0.0, e.cos(), e.sin()]));
        assert!(close(p("Oz"), [0.0, -e.cos(), e.sin()]));
        assert!(close(p("T7"), [-e.cos(), 0.0, e.sin()]));
        let c = (54f64).to_radians();
        assert!(close(p("C3"), [-c.cos(), 0.0, c.sin()]));
        for z in ["Fz", "FCz", "Cz", "CPz", "Pz", "POz", "AFz"] {
            assert_eq!(p(z)[0], 0.0, "{z}");
        }
    }

    // Left/right pairs mirror: x changes sign, y and z are equal.
    #[test]
    fn left_and_right_mirror() {
        for l in ALL {
            let digits: String = l.chars().filter(char::is_ascii_digit).collect();
            let k: usize = digits.parse().unwrap();
            let r = format!("{}{}", l.trim_end_matches(&digits[..]), k + 1);
            let (a, b) = (p(l), p(&r));
            assert!(a[0] < 0.0, "{l}");
            assert!(close(a, [-b[0], b[1], b[2]]), "{l} {r}");
        }
    }

    // Neighbours: steps along a row are equal arcs; the front and back
    // halves of the midline mirror; lateral neighbours are closer than
    // electrodes two steps away.
    #[test]
    fn neighbouring_distances_in_order() {
        for (a, b, c) in [("F1", "F3", "F5"), ("C1", "C3", "C5"), ("P1", "P3", "P5")] {
            assert!((dist(a, b) - dist(b, c)).abs() < 1e-12, "{a}{b}{c}");
        }
        assert!((dist("Fz", "Cz") - dist("Pz", "Cz")).abs() < 1e-12);
        assert!((dist("Fz", "F1") - dist("F1", "F3")).abs() < 1e-12);
        assert!(dist("C3", "Cz") < dist("T7", "Cz"));
        assert!(dist("F3", "F4") > dist("F1", "F2"));
        assert!(dist("Fp1", "Fpz") < dist("Fp1", "Fz"));
        // The F row bows backwards from the circumference: F3 lies between
        // the circumference latitude and Fz's.
        assert!(p("F3")[2] > p("F7")[2] && p("F3")[2] < p("Fz")[2]);
    }

    // Names without a standard place are listed together.
    #[test]
    fn unknown_names_are_listed() {
        let ch: Vec<String> = ["Cz", "EOG1", "AF3", "Foo"].map(String::from).to_vec();
        let e = standard_positions(&ch, System::TenTwenty)
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("3 channel(s)") && e.contains("EOG1, AF3, Foo"),
            "{e}"
        );
        let e = standard_positions(&ch, System::TenTen)
            .unwrap_err()
            .to_string();
        assert!(e.contains("EOG1, Foo") && !e.contains("AF3"), "{e}");
        assert!(position("C7").is_none() && position("T5x").is_none());
        assert!(position("FT3").is_none(), "interior numbers use FC");
    }
}

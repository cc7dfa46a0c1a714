//! A small SVG writer for the HTML report: just the shapes our charts use,
//! text escaped, numbers rounded to 0.1 px. No fonts are embedded; text is
//! SVG text in the page's font, so there is no system font dependency.

use std::fmt::Write;

/// Escapes text for XML (element content and attribute values).
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c if (c as u32) < 0x20 && c != '\n' && c != '\t' => {}
            c => out.push(c),
        }
    }
    out
}

/// One SVG image being built.
pub struct Svg {
    width: f64,
    height: f64,
    body: String,
}

impl Svg {
    /// A new image with an accessible title (shown as a tooltip and read by
    /// screen readers) and a one-sentence description.
    pub fn new(width: f64, height: f64, title: &str, description: &str) -> Svg {
        let mut body = String::new();
        let _ = write!(
            body,
            "<title>{}</title><desc>{}</desc>",
            escape(title),
            escape(description)
        );
        Svg {
            width,
            height,
            body,
        }
    }

    pub fn rect(&mut self, x: f64, y: f64, w: f64, h: f64, fill: &str, extra: &str) {
        let _ = write!(
            self.body,
            "<rect x=\"{x:.1}\" y=\"{y:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"{fill}\"{extra}/>",
            w.max(0.0),
            h.max(0.0)
        );
    }

    /// A rectangle with a tooltip.
    pub fn rect_titled(&mut self, x: f64, y: f64, w: f64, h: f64, fill: &str, tip: &str) {
        let _ = write!(
            self.body,
            "<rect x=\"{x:.1}\" y=\"{y:.1}\" width=\"{:.1}\" height=\"{:.1}\" fill=\"{fill}\"><title>{}</title></rect>",
            w.max(0.0),
            h.max(0.0),
            escape(tip)
        );
    }

    pub fn line(&mut self, x1: f64, y1: f64, x2: f64, y2: f64, stroke: &str, width: f64) {
        let _ = write!(
            self.body,
            "<line x1=\"{x1:.1}\" y1=\"{y1:.1}\" x2=\"{x2:.1}\" y2=\"{y2:.1}\" stroke=\"{stroke}\" stroke-width=\"{width}\"/>"
        );
    }

    pub fn dashed(&mut self, x1: f64, y1: f64, x2: f64, y2: f64, stroke: &str) {
        let _ = write!(
            self.body,
            "<line x1=\"{x1:.1}\" y1=\"{y1:.1}\" x2=\"{x2:.1}\" y2=\"{y2:.1}\" stroke=\"{stroke}\" stroke-width=\"1\" stroke-dasharray=\"4 3\"/>"
        );
    }

    pub fn circle(&mut self, cx: f64, cy: f64, r: f64, fill: &str, tip: &str) {
        let _ = write!(
            self.body,
            "<circle cx=\"{cx:.1}\" cy=\"{cy:.1}\" r=\"{r:.1}\" fill=\"{fill}\" stroke=\"#1d1d1f\" stroke-width=\"0.8\"><title>{}</title></circle>",
            escape(tip)
        );
    }

    pub fn polyline(&mut self, points: &[(f64, f64)], stroke: &str, dash: bool) {
        if points.is_empty() {
            return;
        }
        let pts: Vec<String> = points
            .iter()
            .map(|(x, y)| format!("{x:.1},{y:.1}"))
            .collect();
        let _ = write!(
            self.body,
            "<polyline points=\"{}\" fill=\"none\" stroke=\"{stroke}\" stroke-width=\"1.6\"{}/>",
            pts.join(" "),
            if dash {
                " stroke-dasharray=\"5 3\""
            } else {
                ""
            }
        );
    }

    /// Text; `anchor` is start, middle or end; `class` styles it (see the page CSS).
    pub fn text(&mut self, x: f64, y: f64, s: &str, anchor: &str, class: &str) {
        let _ = write!(
            self.body,
            "<text x=\"{x:.1}\" y=\"{y:.1}\" text-anchor=\"{anchor}\" class=\"{class}\">{}</text>",
            escape(s)
        );
    }

    /// Vertical text (rotated −90°) centred at (x, y).
    pub fn vtext(&mut self, x: f64, y: f64, s: &str, class: &str) {
        let _ = write!(
            self.body,
            "<text x=\"{x:.1}\" y=\"{y:.1}\" text-anchor=\"middle\" class=\"{class}\" transform=\"rotate(-90 {x:.1} {y:.1})\">{}</text>",
            escape(s)
        );
    }

    /// Text rotated −45° ending at (x, y) (crowded axis labels).
    pub fn slanted(&mut self, x: f64, y: f64, s: &str, class: &str) {
        let _ = write!(
            self.body,
            "<text x=\"{x:.1}\" y=\"{y:.1}\" text-anchor=\"end\" class=\"{class}\" transform=\"rotate(-45 {x:.1} {y:.1})\">{}</text>",
            escape(s)
        );
    }

    /// The finished `<svg>` element.
    pub fn finish(self) -> String {
        format!(
            "<svg xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 {w:.0} {h:.0}\" width=\"{w:.0}\" height=\"{h:.0}\" role=\"img\">{}</svg>",
            self.body,
            w = self.width,
            h = self.height
        )
    }
}

/// Round tick values covering [lo, hi] (about `n` of them).
pub fn ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    if !(hi > lo) || !lo.is_finite() || !hi.is_finite() {
        return vec![lo];
    }
    let raw = (hi - lo) / n.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 2.5, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let start = (lo / step).ceil() * step;
    let mut out = Vec::new();
    let mut v = start;
    while v <= hi + 1e-9 * step {
        out.push(if v.abs() < 1e-12 * step { 0.0 } else { v });
        v += step;
    }
    out
}

/// Short tick label.
pub fn fmt_tick(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if !(1e-3..1e4).contains(&a) {
        format!("{v:.0e}")
    } else if a >= 100.0 {
        format!("{v:.0}")
    } else {
        let s = format!("{v:.3}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: escaping and tick choice.
    #[test]
    fn escapes_and_ticks() {
        assert_eq!(escape("a<b & \"c\""), "a&lt;b &amp; &quot;c&quot;");
        assert_eq!(
            ticks(0.0, 1.0, 5),
            vec![0.0, 0.2, 0.4, 0.6000000000000001, 0.8, 1.0]
        );
        assert_eq!(fmt_tick(0.25), "0.25");
        assert_eq!(fmt_tick(1e-6), "1e-6");
        let s = Svg::new(10.0, 10.0, "t", "d").finish();
        assert!(s.starts_with("<svg") && s.contains("<title>t</title>"));
    }
}

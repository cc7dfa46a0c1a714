//! The charts of the HTML report, one function each: heat maps, the
//! ranking chart, bar charts, convergence curves and the dropout raster.
//! Each takes plain numbers (or the extraction record) and returns SVG.

use super::colors::{diverging, sequential};
use super::svg::{Svg, fmt_tick, ticks};
use crate::jobs::extraction_record::ExtractionRecord;

/// Reason colours and one-letter codes: colour is never the only carrier.
const REASONS: [(&str, &str, &str); 7] = [
    ("missing-samples", "M", "#7b3294"),
    ("saturated", "S", "#d6604d"),
    ("no-signal", "Z", "#878787"),
    ("amplitude-outlier", "A", "#e08214"),
    ("broadband-excess", "B", "#35978f"),
    ("isolated", "I", "#4393c3"),
    ("user", "X", "#542788"),
];

/// A heat map of a p×p matrix with channel names, a colour per cell (value
/// in the tooltip), optional markers, and the colour scale as a legend bar.
#[allow(clippy::too_many_arguments)]
pub(super) fn heatmap(
    m: &[Vec<f64>],
    names: &[String],
    title: &str,
    unit: &str,
    scale: f64,
    diverge: bool,
    marks: &[[usize; 2]],
    cell: f64,
) -> String {
    heatmap_from(m, names, title, unit, (0.0, scale), diverge, marks, cell)
}

/// [`heatmap`] with a sequential scale running from `range.0` (the data's
/// least value, so the colours use the whole map) to `range.1`; diverging
/// maps ignore `range.0` and run symmetrically about zero.
#[allow(clippy::too_many_arguments)]
pub(super) fn heatmap_from(
    m: &[Vec<f64>],
    names: &[String],
    title: &str,
    unit: &str,
    range: (f64, f64),
    diverge: bool,
    marks: &[[usize; 2]],
    cell: f64,
) -> String {
    let (floor, scale) = if diverge { (0.0, range.1) } else { range };
    // Sequential colours of v on [floor, scale].
    let seq = |v: f64| sequential(v - floor, (scale - floor).max(f64::MIN_POSITIVE));
    let p = m.len();
    let label_w = 46.0;
    let (x0, y0) = (label_w + 12.0, 40.0);
    let size = cell * p as f64;
    let w = x0 + size + 90.0;
    let h = y0 + size + 54.0;
    let mut s = Svg::new(
        w,
        h,
        title,
        &format!("{p} × {p} matrix, colour = value ({unit}); hover a cell for its value"),
    );
    s.text(x0, 16.0, title, "start", "chart-title");
    s.text(x0, 31.0, "column channel →", "start", "axis-label");
    s.vtext(10.0, y0 + size / 2.0, "row channel", "axis-label");
    for (i, row) in m.iter().enumerate() {
        for (j, &v) in row.iter().enumerate() {
            let (ci, cj) = (
                names.get(i).map_or("?", String::as_str),
                names.get(j).map_or("?", String::as_str),
            );
            if v.is_nan() {
                // Not estimated by this scheme: a light grey cell, said in words.
                s.rect_titled(
                    x0 + j as f64 * cell,
                    y0 + i as f64 * cell,
                    cell,
                    cell,
                    "#e4e4e4",
                    &format!("{ci} × {cj}: not estimated"),
                );
                continue;
            }
            let color = if diverge { diverging(v, scale) } else { seq(v) };
            s.rect_titled(
                x0 + j as f64 * cell,
                y0 + i as f64 * cell,
                cell,
                cell,
                &color,
                &format!("{ci} × {cj}: {} {unit}", fmt_tick(v)),
            );
        }
    }
    for [a, b] in marks {
        for (i, j) in [(*a, *b), (*b, *a)] {
            let (cx, cy) = (x0 + (j as f64 + 0.5) * cell, y0 + (i as f64 + 0.5) * cell);
            let r = cell * 0.35;
            s.line(cx - r, cy - r, cx + r, cy + r, "#111", 1.2);
            s.line(cx - r, cy + r, cx + r, cy - r, "#111", 1.2);
        }
    }
    if cell >= 7.0 {
        for (k, n) in names.iter().enumerate() {
            s.text(x0 - 4.0, y0 + (k as f64 + 0.7) * cell, n, "end", "tick");
            s.slanted(x0 + (k as f64 + 0.6) * cell, y0 + size + 10.0, n, "tick");
        }
    }
    // Legend bar.
    let (lx, ly, lh) = (x0 + size + 18.0, y0, size.max(60.0));
    let steps = 24;
    for k in 0..steps {
        let t = 1.0 - (k as f64 + 0.5) / steps as f64;
        let v = if diverge {
            (2.0 * t - 1.0) * scale
        } else {
            floor + t * (scale - floor)
        };
        let color = if diverge { diverging(v, scale) } else { seq(v) };
        s.rect(
            lx,
            ly + k as f64 * lh / steps as f64,
            12.0,
            lh / steps as f64 + 0.5,
            &color,
            "",
        );
    }
    let (top, bottom) = if diverge {
        (scale, -scale)
    } else {
        (scale, floor)
    };
    s.text(lx + 16.0, ly + 9.0, &fmt_tick(top), "start", "tick");
    s.text(lx + 16.0, ly + lh, &fmt_tick(bottom), "start", "tick");
    s.vtext(lx + 56.0, ly + lh / 2.0, unit, "axis-label");
    s.finish()
}

/// Dot-and-interval chart: one row per scheme, median dot and IQR line.
pub(super) fn ranking_chart(
    scores: &[(String, f64, f64, f64)],
    best: Option<&str>,
    title: &str,
    xlabel: &str,
) -> String {
    let n = scores.len();
    let (x0, y0, w_plot, row) = (190.0, 34.0, 620.0, 22.0);
    let h = y0 + row * n as f64 + 52.0;
    let lo = scores
        .iter()
        .map(|s| s.2)
        .fold(f64::INFINITY, f64::min)
        .min(0.0);
    let hi = scores.iter().map(|s| s.3).fold(0.0f64, f64::max) * 1.05;
    let hi = if hi > lo { hi } else { lo + 1.0 };
    let x = |v: f64| x0 + (v - lo) / (hi - lo) * w_plot;
    let mut s = Svg::new(
        x0 + w_plot + 30.0,
        h,
        title,
        "median (dot) and interquartile range (line) per scheme; lower is better",
    );
    s.text(x0, 16.0, title, "start", "chart-title");
    for t in ticks(lo, hi, 6) {
        s.line(x(t), y0 - 6.0, x(t), y0 + row * n as f64, "#e4e1da", 1.0);
        s.text(
            x(t),
            y0 + row * n as f64 + 14.0,
            &fmt_tick(t),
            "middle",
            "tick",
        );
    }
    s.text(x0 + w_plot / 2.0, h - 10.0, xlabel, "middle", "axis-label");
    s.text(
        8.0,
        y0 - 12.0,
        "scheme (★ recommended)",
        "start",
        "axis-label",
    );
    for (k, (name, med, q1, q3)) in scores.iter().enumerate() {
        let y = y0 + (k as f64 + 0.5) * row;
        let star = best == Some(name.as_str());
        s.text(
            x0 - 8.0,
            y + 4.0,
            &format!("{}{name}", if star { "★ " } else { "" }),
            "end",
            "axis-label",
        );
        s.line(x(*q1), y, x(*q3), y, "#1d1d1f", 2.0);
        s.circle(
            x(*med),
            y,
            if star { 5.5 } else { 4.0 },
            if star { "#b22d30" } else { "#0e3e52" },
            &format!("{name}: median {med:.4}, IQR {q1:.4}–{q3:.4}"),
        );
    }
    s.finish()
}

/// Horizontal bars per channel, with optional [lo, hi] whiskers.
pub(super) fn bars(
    names: &[String],
    values: &[f64],
    whiskers: Option<&[Option<[f64; 2]>]>,
    title: &str,
    xlabel: &str,
    color: &str,
) -> String {
    let n = names.len();
    let (x0, y0, w_plot, row) = (74.0, 30.0, 260.0, 14.0);
    let h = y0 + row * n as f64 + 44.0;
    let mut hi = values
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .fold(0.0f64, f64::max);
    if let Some(ws) = whiskers {
        for w in ws.iter().flatten() {
            hi = hi.max(w[1]);
        }
    }
    let hi = if hi > 0.0 { hi * 1.05 } else { 1.0 };
    let x = |v: f64| x0 + v / hi * w_plot;
    let mut s = Svg::new(
        x0 + w_plot + 20.0,
        h,
        title,
        &format!("one bar per channel: {xlabel}"),
    );
    s.text(x0, 14.0, title, "start", "chart-title");
    for t in ticks(0.0, hi, 4) {
        s.line(x(t), y0 - 4.0, x(t), y0 + row * n as f64, "#e4e1da", 1.0);
        s.text(
            x(t),
            y0 + row * n as f64 + 12.0,
            &fmt_tick(t),
            "middle",
            "tick",
        );
    }
    s.text(x0 + w_plot / 2.0, h - 8.0, xlabel, "middle", "axis-label");
    s.vtext(10.0, y0 + row * n as f64 / 2.0, "channel", "axis-label");
    for (k, name) in names.iter().enumerate() {
        let y = y0 + k as f64 * row;
        s.text(x0 - 4.0, y + row * 0.75, name, "end", "tick");
        let v = values[k];
        if v.is_finite() {
            s.rect_titled(
                x0,
                y + 2.0,
                x(v) - x0,
                row - 4.0,
                color,
                &format!("{name}: {}", fmt_tick(v)),
            );
        }
        if let Some(Some([a, b])) = whiskers.map(|w| w[k]) {
            s.line(x(a), y + row / 2.0, x(b), y + row / 2.0, "#1d1d1f", 1.2);
            s.line(x(a), y + 3.0, x(a), y + row - 3.0, "#1d1d1f", 1.2);
            s.line(x(b), y + 3.0, x(b), y + row - 3.0, "#1d1d1f", 1.2);
        }
    }
    s.finish()
}

/// Convergence: one line per iterative scheme, value per iteration on a log axis.
pub(super) fn convergence(
    series: &[(String, Vec<(f64, f64)>)],
    title: &str,
    ylabel: &str,
) -> String {
    let (x0, y0, w_plot, h_plot) = (70.0, 30.0, 470.0, 220.0);
    let pts: Vec<f64> = series
        .iter()
        .flat_map(|(_, s)| s.iter().map(|p| p.1))
        .filter(|v| *v > 0.0 && v.is_finite())
        .collect();
    let (mut lo, mut hi) = (
        pts.iter().copied().fold(f64::INFINITY, f64::min),
        pts.iter().copied().fold(0.0f64, f64::max),
    );
    if !(lo > 0.0) || !(hi > lo) {
        lo = 1e-12;
        hi = 1.0;
    }
    let (llo, lhi) = (
        lo.log10().floor(),
        hi.log10().ceil().max(lo.log10().floor() + 1.0),
    );
    let max_it = series
        .iter()
        .flat_map(|(_, s)| s.iter().map(|p| p.0))
        .fold(1.0f64, f64::max);
    let x = |i: f64| x0 + i / max_it * w_plot;
    let y = |v: f64| y0 + h_plot - (v.log10() - llo) / (lhi - llo) * h_plot;
    // Room for the longest legend entry and for every row of the legend.
    let legend_w = series
        .iter()
        .map(|(n, _)| n.chars().count() + 10)
        .max()
        .unwrap_or(0) as f64
        * 6.4
        + 50.0;
    let legend_h = 12.0 + 15.0 * series.len() as f64;
    let mut s = Svg::new(
        x0 + w_plot + legend_w.max(120.0),
        (y0 + h_plot + 46.0).max(y0 + legend_h),
        title,
        &format!("{ylabel} against iteration, logarithmic vertical axis"),
    );
    s.text(x0, 16.0, title, "start", "chart-title");
    let mut e = llo;
    while e <= lhi + 1e-9 {
        let v = 10f64.powf(e);
        s.line(x0, y(v), x0 + w_plot, y(v), "#e4e1da", 1.0);
        s.text(x0 - 6.0, y(v) + 3.0, &format!("1e{e:.0}"), "end", "tick");
        e += ((lhi - llo) / 6.0).ceil().max(1.0);
    }
    for t in ticks(0.0, max_it, 6) {
        s.text(x(t), y0 + h_plot + 14.0, &fmt_tick(t), "middle", "tick");
    }
    s.text(
        x0 + w_plot / 2.0,
        y0 + h_plot + 36.0,
        "iteration (count)",
        "middle",
        "axis-label",
    );
    s.vtext(16.0, y0 + h_plot / 2.0, ylabel, "axis-label");
    let palette = [
        "#0e3e52", "#b22d30", "#e08214", "#35978f", "#542788", "#878787", "#4393c3", "#7b3294",
        "#d6604d", "#1b7837",
    ];
    // Ten colours, solid then dashed: twenty series before a style repeats.
    for (k, (name, pts)) in series.iter().enumerate() {
        let color = palette[k % palette.len()];
        let dash = (k / palette.len()) % 2 == 1;
        let p: Vec<(f64, f64)> = pts
            .iter()
            .filter(|p| p.1 > 0.0 && p.1.is_finite())
            .map(|&(i, v)| (x(i), y(v)))
            .collect();
        s.polyline(&p, color, dash);
        let ly = y0 + 6.0 + k as f64 * 15.0;
        // The swatch is drawn like the curve (dashed when it is).
        s.polyline(
            &[(x0 + w_plot + 14.0, ly), (x0 + w_plot + 34.0, ly)],
            color,
            dash,
        );
        s.text(
            x0 + w_plot + 40.0,
            ly + 4.0,
            &format!("{name}{}", if dash { " (dashed)" } else { "" }),
            "start",
            "legend",
        );
    }
    s.finish()
}

/// Dropout raster: epochs across, channels down, a cell per masked
/// (epoch, channel) coloured and lettered by reason, sessions separated.
pub(super) fn raster(epochs: &ExtractionRecord, names: &[String]) -> Option<String> {
    let list = &epochs.epochs;
    let n = list.len();
    let p = names.len();
    if n == 0 || p == 0 {
        return None;
    }
    let cw = (1080.0 / n as f64).clamp(1.0, 16.0);
    let ch = 12.0;
    let (x0, y0) = (56.0, 36.0);
    let w = x0 + cw * n as f64 + 20.0;
    let h = y0 + ch * p as f64 + 70.0;
    let mut s = Svg::new(
        w,
        h,
        "Dropout raster",
        "masked (epoch, channel) cells coloured and lettered by reason; vertical lines separate sessions",
    );
    s.text(
        x0,
        16.0,
        "Which channel each epoch lost, and why",
        "start",
        "chart-title",
    );
    s.rect(
        x0,
        y0,
        cw * n as f64,
        ch * p as f64,
        "#ffffff",
        " stroke=\"#d9d6cf\"",
    );
    let mut last_session = String::new();
    for (e, ep) in list.iter().enumerate() {
        let session = ep.session.clone();
        if session != last_session {
            let x = x0 + e as f64 * cw;
            s.line(x, y0 - 4.0, x, y0 + ch * p as f64, "#1d1d1f", 1.0);
            s.text(x + 2.0, y0 - 6.0, &session, "start", "tick");
            last_session = session;
        }
        for m in &ep.masked {
            let ch_name = m.channel.as_str();
            let reason = m.reason.as_str();
            let Some(c) = names.iter().position(|n| n == ch_name) else {
                continue;
            };
            let (code, color) = REASONS
                .iter()
                .find(|r| r.0 == reason)
                .map_or(("?", "#444"), |r| (r.1, r.2));
            let (x, y) = (x0 + e as f64 * cw, y0 + c as f64 * ch);
            s.rect_titled(
                x,
                y,
                cw,
                ch,
                color,
                &format!("epoch {e}, {ch_name}: {reason}"),
            );
            if cw >= 8.0 {
                s.text(x + cw / 2.0, y + ch - 3.0, code, "middle", "cell-code");
            }
        }
    }
    for (c, name) in names.iter().enumerate() {
        s.text(x0 - 4.0, y0 + (c as f64 + 0.8) * ch, name, "end", "tick");
    }
    s.text(
        x0 + cw * n as f64 / 2.0,
        y0 + ch * p as f64 + 16.0,
        "epoch (index, in recording order)",
        "middle",
        "axis-label",
    );
    s.vtext(12.0, y0 + ch * p as f64 / 2.0, "channel", "axis-label");
    let mut lx = x0;
    let ly = y0 + ch * p as f64 + 34.0;
    for (name, code, color) in REASONS {
        s.rect(lx, ly, 12.0, 12.0, color, "");
        s.text(lx + 6.0, ly + 9.0, code, "middle", "cell-code");
        s.text(lx + 16.0, ly + 10.0, name, "start", "legend");
        lx += 28.0 + name.len() as f64 * 6.2;
    }
    Some(s.finish())
}

//! The self-contained HTML report: inline CSS and SVG, no scripts, no
//! external resources, readable at 1280 px and printable.
//!
//! It formats a typed [`Comparison`] (what compare.json holds) and, when
//! given, an [`ExtractionRecord`] (epochs.json); it computes nothing new and
//! reads nothing else.

use crate::jobs::comparison::{Comparison, SchemeMean};
use crate::jobs::extraction_record::ExtractionRecord;

use super::charts::{bars, convergence, heatmap, heatmap_from, ranking_chart, raster};
use super::svg::escape;

const CSS: &str = r#"
:root { --ink: #1d1d1f; --muted: #5b5b63; --rule: #d9d6cf; --paper: #fbfaf7; --accent: #0e3e52; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
  font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", sans-serif; }
main { max-width: 1200px; margin: 0 auto; padding: 24px 32px 48px; }
header h1 { font-size: 26px; margin: 0 0 4px; letter-spacing: 0.01em; }
header p { margin: 0; color: var(--muted); }
.caution { border-left: 4px solid #b22d30; background: #fff; padding: 10px 14px; margin: 16px 0 8px; }
section { margin-top: 28px; border-top: 1px solid var(--rule); padding-top: 12px; }
h2 { font-size: 19px; margin: 0 0 6px; color: var(--accent); }
h3 { font-size: 15px; margin: 14px 0 4px; }
p.note { color: var(--muted); margin: 4px 0 8px; max-width: 900px; }
figure { margin: 10px 0 18px; }
figcaption { color: var(--muted); font-size: 13px; max-width: 900px; }
.grid { display: flex; flex-wrap: wrap; gap: 14px; }
.verdict { font-size: 17px; font-weight: 600; }
ul.reasons li { margin: 3px 0; }
table { border-collapse: collapse; font-size: 13px; }
th, td { border-bottom: 1px solid var(--rule); padding: 3px 8px; text-align: right; }
th:first-child, td:first-child { text-align: left; }
svg { max-width: 100%; height: auto; }
dl.glossary { max-width: 900px; margin: 6px 0; }
dl.glossary dt { margin-top: 8px; }
dl.glossary .where { color: var(--muted); font-size: 13px; }
dl.glossary dd { margin: 2px 0 0 18px; }
svg text { font-family: system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", sans-serif; fill: var(--ink); }
svg .tick { font-size: 10px; fill: var(--muted); }
svg .axis-label { font-size: 12px; }
svg .chart-title { font-size: 13px; font-weight: 600; }
svg .cell-code { font-size: 8px; fill: #111; }
svg .legend { font-size: 11px; }
@media print {
  body { background: #fff; font-size: 11pt; }
  main { max-width: none; padding: 0; }
  section, figure { break-inside: avoid; page-break-inside: avoid; }
  .caution { border: 1px solid #b22d30; }
}
"#;

/// A matrix with NaN for missing entries.
fn dense(m: &[Vec<Option<f64>>]) -> Vec<Vec<f64>> {
    m.iter()
        .map(|r| r.iter().map(|x| x.unwrap_or(f64::NAN)).collect())
        .collect()
}

fn section(title: &str, body: &str) -> String {
    format!("<section><h2>{}</h2>{body}</section>", escape(title))
}

fn figure(svg: &str, caption: &str) -> String {
    format!(
        "<figure>{svg}<figcaption>{}</figcaption></figure>",
        escape(caption)
    )
}

/// The covariance unit: the comparison's, else the extraction's (extract
/// read it from the recording), else none.
fn covariance_unit<'a>(
    compare: &'a Comparison,
    epochs: Option<&'a ExtractionRecord>,
) -> Option<&'a str> {
    compare
        .covariance_unit
        .as_deref()
        .or_else(|| epochs.and_then(|e| e.covariance_unit.as_deref()))
}

/// Rows shown per scheme in the outlier table; the JSON lists them all.
const OUTLIER_ROWS: usize = 40;

/// The robust schemes' flagged trials, one table per scheme (None when no
/// robust scheme ran).
fn outlier_section(compare: &Comparison) -> Option<String> {
    let robust: Vec<&SchemeMean> = compare
        .schemes
        .iter()
        .filter_map(|s| s.ok())
        .filter(|s| {
            s.scheme.starts_with("airm-observed-median")
                || s.scheme.starts_with("airm-observed-huber")
        })
        .collect();
    if robust.is_empty() {
        return None;
    }
    let mut sec = String::from(
        "<p class=\"note\">A trial is flagged when the modified z-score of its distance to the robust mean, 0.6745 (δ − median δ) / MAD, exceeds 3.5. Flagged trials weigh less in that mean; look at them (artefacts, a loose electrode, a different condition) before trusting any mean that gives them full weight. Trial numbers count from 0 in the order of the stack.</p>",
    );
    for s in robust {
        if s.outliers.is_empty() {
            sec.push_str(&format!(
                "<p><strong>{}</strong>: no trial flagged.</p>",
                escape(&s.scheme)
            ));
            continue;
        }
        sec.push_str(&format!(
            "<p><strong>{}</strong>: {} of {} trials flagged{}.</p><table><tr><th>trial</th><th>distance to the mean</th><th>modified z</th></tr>",
            escape(&s.scheme),
            s.outliers.len(),
            compare.trials,
            if s.outliers.len() > OUTLIER_ROWS {
                format!(" (the {OUTLIER_ROWS} farthest shown; compare.json lists all)")
            } else {
                String::new()
            }
        ));
        let mut rows = s.outliers.clone();
        rows.sort_by(|a, b| b.z.total_cmp(&a.z).then(a.trial.cmp(&b.trial)));
        for o in rows.iter().take(OUTLIER_ROWS) {
            sec.push_str(&format!(
                "<tr><td>{}</td><td>{:.3}</td><td>{:.1}</td></tr>",
                o.trial, o.distance, o.z
            ));
        }
        sec.push_str("</table>");
    }
    Some(sec)
}

/// Renders the report of a comparison (and, optionally, its extraction).
pub fn render(compare: &Comparison, epochs: Option<&ExtractionRecord>) -> String {
    let names = &compare.channels;
    let p = names.len();
    let rec = compare.recommendation.as_ref();
    let best = rec.and_then(|r| r.scheme.as_deref());
    let mut body = String::new();
    body.push_str(&format!(
        "<header><h1>lacuna report</h1><p>{} trials × {p} channels · {} schemes compared · seed {} · lacuna {}</p></header>",
        compare.trials,
        compare.schemes.len(),
        compare.seed,
        escape(&compare.lacuna_version)
    ));
    body.push_str("<p class=\"caution\"><strong>Research software, not a medical device.</strong> These results inform analysis; they do not diagnose. Follow your local rules and licensed clinical practice.</p>");

    // Recommendation and ranking.
    let mut sec = String::new();
    let verdict = match (best, rec.map(|r| r.clear)) {
        (Some(b), Some(true)) => format!("Recommended: {b}"),
        (Some(b), _) => format!(
            "No clear winner — best on {}: {b} (tied: {})",
            match rec.map(|r| r.primary.as_str()) {
                Some("held-out-fit") => "held-out fit",
                _ => "simulated dropout",
            },
            rec.map(|r| r.tied.join(", ")).unwrap_or_default()
        ),
        _ => "No recommendation (validation not run or no scheme completed it)".into(),
    };
    sec.push_str(&format!(
        "<p class=\"verdict\">{}</p><p class=\"note\">Target: {}.</p><ul class=\"reasons\">",
        escape(&verdict),
        match compare.target {
            crate::select::Target::Population => "the population covariance",
            crate::select::Target::Centre => "the Riemannian centre of the trials",
        }
    ));
    for r in rec.map(|r| r.reasons.as_slice()).unwrap_or_default() {
        sec.push_str(&format!("<li>{}</li>", escape(r)));
    }
    sec.push_str("</ul>");
    let mut scores: Vec<(String, f64, f64, f64)> = compare
        .simulated_dropout
        .iter()
        .flat_map(|d| &d.scores)
        .filter(|s| s.partial_channels.is_none())
        .filter_map(|s| Some((s.scheme.clone(), s.median?, s.q1?, s.q3?)))
        .collect();
    scores.sort_by(|a, b| a.1.total_cmp(&b.1));
    if !scores.is_empty() {
        sec.push_str(&figure(
            &ranking_chart(&scores, best, "Simulated dropout: distance to the complete-data reference", "affine-invariant distance to the reference (dimensionless)"),
            "Each scheme averaged the complete trials after the data's own dropout patterns were imposed on them again; dot = median over repeats, line = interquartile range. ★ marks the recommendation.",
        ));
    }
    body.push_str(&section("Which scheme to trust", &sec));

    // Ranks of the trials as given.
    let ranks = &compare.ranks;
    if !ranks.deficient.is_empty() {
        let mut t = String::from(
            "<p class=\"note\">A block's rank counts its eigenvalues above k·ε·λ<sub>max</sub> (k channels observed). Riemannian schemes need full rank; the others, and the masked mean after a regulariser, take these windows.</p><table><tr><th>likely cause</th><th>trials</th></tr>",
        );
        for (cause, n) in &ranks.by_cause {
            t.push_str(&format!("<tr><td>{}</td><td>{n}</td></tr>", escape(cause)));
        }
        t.push_str(&format!(
            "<tr><td>full rank</td><td>{}</td></tr></table>",
            ranks.full_rank
        ));
        body.push_str(&section("Rank-deficient trials", &t));
    }

    // Outlier trials flagged by the robust schemes.
    if let Some(sec) = outlier_section(compare) {
        body.push_str(&section("Outlier trials", &sec));
    }

    // Dropout and coverage.
    let mut sec = String::new();
    if let Some(ep) = epochs
        && let Some(svg) = raster(ep, &ep.channels)
    {
        sec.push_str(&figure(&svg, "Letters repeat the colours: M missing samples, S saturated, Z no signal, A amplitude outlier, B broadband excess, I isolated from the other channels, X marked by the user."));
    }
    {
        let co: Vec<Vec<f64>> = compare
            .coobservation
            .iter()
            .map(|r| r.iter().map(|&n| n as f64).collect())
            .collect();
        let marks = &compare.unconstrained_pairs;
        let max = co.iter().flatten().copied().fold(0.0f64, f64::max);
        // The colours span the data's own range (e.g. 59–90 trials), not 0–max.
        let min = co.iter().flatten().copied().fold(f64::INFINITY, f64::min);
        let min = if min < max { min } else { 0.0 };
        let cell = (640.0 / p as f64).clamp(4.0, 22.0);
        sec.push_str(&figure(
            &heatmap_from(&co, names, "Co-observation: trials observing both channels", "trials", (min, max), false, marks, cell),
            "The diagonal is each channel's coverage. × marks pairs never observed together: the data do not pin their covariance, and airm-observed fills it by the maximum-determinant completion.",
        ));
    }
    body.push_str(&section("Dropout and coverage", &sec));

    // Means and differences.
    let rows: Vec<&SchemeMean> = compare.schemes.iter().filter_map(|s| s.ok()).collect();
    // The covariance unit when the inputs named one (EDF header or --unit).
    let cov_unit = covariance_unit(compare, epochs).map_or("data units²".to_string(), escape);
    let means: Vec<(String, Vec<Vec<f64>>)> = rows
        .iter()
        .map(|s| (s.scheme.clone(), dense(&s.mean)))
        .collect();
    let mut sec = String::new();
    if !means.is_empty() {
        let scale = means
            .iter()
            .flat_map(|(_, m)| m.iter().flatten().copied())
            .filter(|v| v.is_finite())
            .fold(0.0f64, |a, v| a.max(v.abs()));
        let cell = (300.0 / p as f64).clamp(3.0, 12.0);
        sec.push_str(&format!("<p class=\"note\">All maps share one diverging colour scale, symmetric about zero, in the covariance unit ({cov_unit}). Light grey cells are entries a scheme did not estimate.</p><div class=\"grid\">"));
        for (name, m) in &means {
            sec.push_str(&heatmap(
                m,
                names,
                &format!("Mean: {name}"),
                &format!("covariance ({cov_unit})"),
                scale,
                true,
                &[],
                cell,
            ));
        }
        sec.push_str("</div>");
        if let Some(b) = best
            && let Some((_, reference)) = means.iter().find(|(n, _)| n == b)
        {
            let diffs: Vec<(String, Vec<Vec<f64>>)> = means
                .iter()
                .filter(|(n, _)| n != b)
                .map(|(n, m)| {
                    (
                        n.clone(),
                        m.iter()
                            .zip(reference)
                            .map(|(r, q)| r.iter().zip(q).map(|(x, y)| x - y).collect())
                            .collect(),
                    )
                })
                .collect();
            let dscale = diffs
                .iter()
                .flat_map(|(_, m)| m.iter().flatten().copied())
                .filter(|v| v.is_finite())
                .fold(0.0f64, |a, v| a.max(v.abs()));
            sec.push_str(&format!(
                "<h3>Differences from the recommended scheme ({})</h3><div class=\"grid\">",
                escape(b)
            ));
            for (name, m) in &diffs {
                sec.push_str(&heatmap(
                    m,
                    names,
                    &format!("{name} − {b}"),
                    &format!("difference ({cov_unit})"),
                    dscale,
                    true,
                    &[],
                    cell,
                ));
            }
            sec.push_str("</div>");
        }
    }
    body.push_str(&section("The means", &sec));

    // Convergence.
    // Non-finite points (null in compare.json) are left out of the curves.
    let finite = |pts: Vec<(f64, f64)>| -> Vec<(f64, f64)> {
        pts.into_iter()
            .filter(|(x, y)| x.is_finite() && y.is_finite())
            .collect()
    };
    let grad: Vec<(String, Vec<(f64, f64)>)> = rows
        .iter()
        .filter(|s| s.trace.len() >= 2)
        .map(|s| {
            (
                s.scheme.clone(),
                finite(
                    s.trace
                        .iter()
                        .map(|r| (r.iteration as f64, r.gradient_norm))
                        .collect(),
                ),
            )
        })
        .collect();
    let cost: Vec<(String, Vec<(f64, f64)>)> = rows
        .iter()
        .filter(|s| s.trace.len() >= 2 && s.trace.last().is_some_and(|r| r.cost.is_finite()))
        .map(|s| {
            let last = s.trace.last().map_or(f64::NAN, |r| r.cost);
            (
                s.scheme.clone(),
                finite(
                    s.trace
                        .iter()
                        .map(|r| {
                            (
                                r.iteration as f64,
                                (r.cost - last).abs() / last.abs().max(1e-300),
                            )
                        })
                        .collect(),
                ),
            )
        })
        .collect();
    let mut sec = String::new();
    if !grad.is_empty() {
        sec.push_str(&figure(&convergence(&grad, "Gradient norm per iteration", "relative gradient norm (dimensionless)"), "The stopping rule is met when the curve crosses the tolerance; EM reports its relative change instead."));
        sec.push_str(&figure(
            &convergence(
                &cost,
                "Cost above its final value",
                "(cost − final) / final (dimensionless)",
            ),
            "Each scheme's own cost: the masked or Karcher cost, or EM's negative log-likelihood.",
        ));
    } else {
        sec.push_str("<p class=\"note\">No iterative scheme recorded a trace.</p>");
    }
    body.push_str(&section("Convergence", &sec));

    // Contributions.
    let mut sec = String::new();
    if let Some(cs) = &compare.contributions {
        let ch: Vec<String> = cs.iter().map(|c| c.channel.clone()).collect();
        let get = |f: fn(&crate::diagnose::ChannelContribution) -> f64| {
            cs.iter().map(f).collect::<Vec<f64>>()
        };
        let interval: Vec<Option<[f64; 2]>> = cs
            .iter()
            .map(|c| {
                let iv = c.variance_interval?;
                Some([iv[0] / c.variance, iv[1] / c.variance])
            })
            .collect();
        let ones: Vec<f64> = cs.iter().map(|_| 1.0).collect();
        sec.push_str("<div class=\"grid\">");
        sec.push_str(&bars(
            &ch,
            &get(|c| c.weight_share),
            None,
            "Weight share",
            "share of total trial weight (fraction)",
            "#0e3e52",
        ));
        sec.push_str(&bars(
            &ch,
            &get(|c| c.cost_share),
            None,
            "Cost share",
            "share of the masked cost (fraction)",
            "#b22d30",
        ));
        sec.push_str(&bars(
            &ch,
            &get(|c| c.leave_out_influence.unwrap_or(f64::NAN)),
            None,
            "Leave-one-out influence",
            &match cs.first().and_then(|c| c.leave_out_trials) {
                Some(m) if m < compare.trials => format!(
                    "distance when left out, {m} of {} trials (seeded subset)",
                    compare.trials
                ),
                _ => "distance when left out (dimensionless)".to_string(),
            },
            "#e08214",
        ));
        if interval.iter().any(Option::is_some) {
            sec.push_str(&bars(
                &ch,
                &ones,
                Some(&interval),
                "Bootstrap spread of the variance",
                "variance / estimate, 5–95% interval (ratio)",
                "#d9d6cf",
            ));
        }
        sec.push_str("</div><p class=\"note\">A channel with a large cost share disagrees with the rest (noise, poor contact); a large leave-one-out influence means the mean leans on it; a small weight share means few trials observed it.</p>");
    } else {
        sec.push_str(
            "<p class=\"note\">Contributions were not computed (airm-observed did not run).</p>",
        );
    }
    body.push_str(&section("What each channel contributed", &sec));

    // Table of schemes.
    let mut t = String::from(
        "<table><tr><th>scheme</th><th>converged</th><th>iterations</th><th>seconds</th><th>condition number</th><th>dispersion</th><th>log-det gap</th><th>channels</th></tr>",
    );
    for row in &compare.schemes {
        match row {
            crate::jobs::comparison::SchemeRow::Ok(s) => t.push_str(&format!(
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{:.2}</td><td>{:.3e}</td><td>{:.4}</td><td>{:.4}</td><td>{}</td></tr>",
                escape(&s.scheme),
                s.converged,
                s.iterations,
                s.seconds,
                s.condition_number,
                s.dispersion,
                s.log_det_gap,
                s.estimated_channels
            )),
            crate::jobs::comparison::SchemeRow::NotApplicable { scheme, reason } => {
                t.push_str(&format!(
                    "<tr><td>{}</td><td colspan=\"7\">not applicable: {}</td></tr>",
                    escape(scheme),
                    escape(reason)
                ))
            }
        }
    }
    t.push_str("</table>");
    body.push_str(&section("All schemes", &t));
    body.push_str(&section(
        "What the numbers mean",
        &format!(
            "<p class=\"note\">Every column of the tables above and of the CSV files beside compare.json, with its unit. Distances are affine-invariant: unit-free, and unchanged when every channel is rescaled.</p>{}",
            super::glossary::html(super::glossary::COMPARE, covariance_unit(compare, epochs))
        ),
    ));
    // Where the page came from (read from compare.json, drawn as given).
    if let Some(prov) = &compare.provenance {
        let mut p = format!(
            "<p class=\"note\">Made by lacuna {} on {} with: <code>{}</code></p><ul class=\"note\">",
            escape(&prov.lacuna_version),
            escape(&prov.created_utc),
            escape(&prov.command_line.join(" "))
        );
        for i in &prov.inputs {
            p.push_str(&format!(
                "<li>{} — {} bytes, SHA-256 {}</li>",
                escape(&i.path),
                i.bytes,
                escape(&i.sha256)
            ));
        }
        p.push_str("</ul>");
        body.push_str(&section("Provenance", &p));
    }
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"/><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/><title>lacuna report</title><style>{CSS}</style></head><body><main>{body}</main></body></html>\n"
    )
}

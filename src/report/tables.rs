//! Every CSV lacuna writes goes through this module and the csv crate: one
//! quoting rule (quotes only where needed — commas, quotes, line breaks —
//! with `\n` line ends), so channel names and event labels survive any
//! spelling. The comparison's tables read only the typed [`Comparison`].

use crate::diagnose::ChannelContribution;
use crate::jobs::comparison::{Comparison, SchemeRow, ScoreRow};
use crate::spd::Mat;

/// A whole table: the header, then one record per row.
pub fn table<H, R, S>(header: &[H], rows: R) -> Vec<u8>
where
    H: AsRef<str>,
    R: IntoIterator<Item = Vec<S>>,
    S: AsRef<str>,
{
    let mut w = csv::WriterBuilder::new()
        .terminator(csv::Terminator::Any(b'\n'))
        .quote_style(csv::QuoteStyle::Necessary)
        .flexible(true)
        .from_writer(Vec::new());
    // Writing to memory cannot fail.
    let _ = w.write_record(header.iter().map(|f| f.as_ref().as_bytes()));
    for row in rows {
        if row.is_empty() {
            // The csv crate refuses an empty record; one empty field is the same line.
            let _ = w.write_record([""]);
        } else {
            let _ = w.write_record(row.iter().map(|f| f.as_ref().as_bytes()));
        }
    }
    w.into_inner().unwrap_or_default()
}

/// A `p×p` matrix under a header of channel names; NaN (not estimated) is
/// an empty cell; full precision (`{:.17e}`), so the CSV reads back exactly.
pub fn matrix(m: &Mat, channels: &[String]) -> Vec<u8> {
    let p = m.nrows();
    table(
        channels,
        (0..p).map(|i| {
            (0..m.ncols())
                .map(|j| {
                    let v = m[(i, j)];
                    if v.is_nan() {
                        String::new()
                    } else {
                        format!("{v:.17e}")
                    }
                })
                .collect::<Vec<String>>()
        }),
    )
}

/// A mask: a header of channel names, one row of 0/1 per trial (1 = observed).
pub fn mask(channels: &[String], mask: &[bool]) -> Vec<u8> {
    let p = channels.len().max(1);
    table(
        channels,
        mask.chunks(p).map(|row| {
            row.iter()
                .map(|&b| if b { "1" } else { "0" })
                .collect::<Vec<_>>()
        }),
    )
}

fn opt(x: Option<f64>, f: impl Fn(f64) -> String) -> String {
    x.map_or(String::new(), f)
}

/// comparison.csv: one row per candidate.
pub fn comparison(c: &Comparison) -> Vec<u8> {
    table(
        &[
            "scheme",
            "status",
            "converged",
            "iterations",
            "seconds",
            "condition_number",
            "log_det",
            "log_det_gap",
            "dispersion",
            "estimated_channels",
            "notes",
        ],
        c.schemes.iter().map(|row| match row {
            SchemeRow::Ok(m) => vec![
                m.scheme.clone(),
                "ok".into(),
                m.converged.to_string(),
                m.iterations.to_string(),
                format!("{:.4}", m.seconds),
                format!("{:.6e}", m.condition_number),
                format!("{:.6}", m.log_det.unwrap_or(f64::NAN)),
                format!("{:.6}", m.log_det_gap),
                format!("{:.6}", m.dispersion),
                m.estimated_channels.to_string(),
                m.notes.join("; "),
            ],
            SchemeRow::NotApplicable { scheme, reason } => {
                let mut r = vec![scheme.clone(), "not applicable".into()];
                r.extend(std::iter::repeat_n(String::new(), 8));
                r.push(reason.clone());
                r
            }
        }),
    )
}

/// distances.csv: the candidates' pairwise distances, empty where either failed.
pub fn distances(c: &Comparison) -> Vec<u8> {
    let mut header = vec!["scheme".to_string()];
    header.extend(c.distances.schemes.iter().cloned());
    table(
        &header,
        c.distances
            .matrix
            .iter()
            .zip(&c.distances.schemes)
            .map(|(row, name)| {
                let mut r = vec![name.clone()];
                r.extend(row.iter().map(|d| opt(*d, |v| format!("{v:.6}"))));
                r
            }),
    )
}

/// validation.csv: every protocol's spread per candidate, or None when no
/// protocol ran.
pub fn validation(c: &Comparison) -> Option<Vec<u8>> {
    let mut sections: Vec<(&str, &[ScoreRow])> = Vec::new();
    if let Some(d) = &c.simulated_dropout {
        sections.push(("simulated-dropout", &d.scores));
    }
    if let Some(f) = &c.held_out_fit {
        sections.push(("held-out-fit", &f.scores));
    }
    if let Some(d) = &c.decoding {
        sections.push(("decoding-accuracy", &d.scores));
    }
    if sections.is_empty() {
        return None;
    }
    let f = |x: Option<f64>| opt(x, |v| format!("{v:.6}"));
    Some(table(
        &["protocol", "scheme", "median", "q1", "q3", "n", "failures"],
        sections.into_iter().flat_map(|(name, scores)| {
            scores.iter().map(move |s| {
                vec![
                    name.to_string(),
                    s.scheme.clone(),
                    f(s.median),
                    f(s.q1),
                    f(s.q3),
                    s.n.unwrap_or(0).to_string(),
                    s.failures.to_string(),
                ]
            })
        }),
    ))
}

/// contributions.csv: one row per channel.
pub fn contributions(cs: &[ChannelContribution]) -> Vec<u8> {
    let f = |x: Option<f64>| opt(x, |v| format!("{v:.6e}"));
    table(
        &[
            "channel",
            "trials_observed",
            "weight_share",
            "coobserved_with",
            "cost_share",
            "leave_out_influence",
            "leave_out_trials",
            "variance",
            "variance_q05",
            "variance_q95",
            "correlation_sd",
        ],
        cs.iter().map(|c| {
            vec![
                c.channel.clone(),
                c.trials_observed.to_string(),
                format!("{:.6}", c.weight_share),
                c.coobserved_with.to_string(),
                format!("{:.6}", c.cost_share),
                f(c.leave_out_influence),
                c.leave_out_trials.map_or(String::new(), |n| n.to_string()),
                format!("{:.6e}", c.variance),
                f(c.variance_interval.map(|v| v[0])),
                f(c.variance_interval.map(|v| v[1])),
                f(c.correlation_sd),
            ]
        }),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice (RFC 4180 quoting), no source: names with commas,
    // quotes and line breaks read back unchanged through the csv crate.
    #[test]
    fn awkward_names_round_trip() {
        let names = ["a,b", "say \"hi\"", "two\nlines", "plain"];
        let bytes = table(&["name", "x"], names.iter().map(|n| vec![*n, "1"]));
        let mut r = csv::Reader::from_reader(bytes.as_slice());
        let back: Vec<String> = r.records().map(|rec| rec.unwrap()[0].to_string()).collect();
        assert_eq!(back, names);
    }

    // Common practice, no source: a matrix written at full precision reads
    // back bit for bit, NaN as an empty cell.
    #[test]
    fn matrix_reads_back_exactly() {
        let m = Mat::from_row_slice(2, 2, &[1.0 / 3.0, f64::NAN, -2e-300, 7.0]);
        let bytes = matrix(&m, &["x,1".into(), "y".into()]);
        let mut r = csv::Reader::from_reader(bytes.as_slice());
        assert_eq!(&r.headers().unwrap()[0], "x,1");
        let rows: Vec<csv::StringRecord> = r.records().map(Result::unwrap).collect();
        assert_eq!(rows[0][0].parse::<f64>().unwrap(), 1.0 / 3.0);
        assert_eq!(&rows[0][1], "");
        assert_eq!(rows[1][0].parse::<f64>().unwrap(), -2e-300);
    }
}

//! What every number in lacuna's tables means, with its unit: one list,
//! printed by `--help` of the commands that write the tables and on the HTML
//! page, so the two can never say different things.

/// One column or measure of an output table.
#[derive(Debug, Clone, Copy)]
pub struct Term {
    /// File the column is in.
    pub file: &'static str,
    /// Column name (as in the CSV header).
    pub column: &'static str,
    /// Unit; `UNIT2` stands for the data's unit squared (µV² for an EDF in µV).
    pub unit: &'static str,
    /// What it is, how it is computed, and which way is better.
    pub meaning: &'static str,
}

/// Placeholder in [`Term::unit`] for the covariance unit.
pub const UNIT2: &str = "UNIT²";

/// The columns of `lacuna compare`'s tables (and the HTML page drawn from them).
pub const COMPARE: &[Term] = &[
    Term {
        file: "comparison.csv",
        column: "scheme, status",
        unit: "name",
        meaning: "the averaging scheme (docs/schemes.md), and ok or the reason it could not run",
    },
    Term {
        file: "comparison.csv",
        column: "iterations, seconds",
        unit: "count; seconds of wall time",
        meaning: "solver iterations (0 for closed forms) and the time the scheme took on all trials",
    },
    Term {
        file: "comparison.csv",
        column: "converged",
        unit: "yes/no",
        meaning: "the iterative scheme met its stopping tolerance (--tol, on the Riemannian gradient norm); closed-form schemes are always converged",
    },
    Term {
        file: "comparison.csv",
        column: "condition_number",
        unit: "ratio",
        meaning: "largest over smallest eigenvalue of the mean; above about 1e8 the mean is close to singular and its inverse unreliable",
    },
    Term {
        file: "comparison.csv",
        column: "log_det",
        unit: "ln of UNIT² per channel, summed",
        meaning: "natural log of the mean's determinant (its volume); rescaling the data by s adds 2p·ln s",
    },
    Term {
        file: "comparison.csv",
        column: "log_det_gap",
        unit: "nats (unit-free)",
        meaning: "Σ ŵᵢ (ln det M[oᵢ,oᵢ] − ln det Cᵢ) over trials i with weights ŵ summing to 1: how much bigger in volume the mean is than the trials, on each trial's observed channels. 0 for the Karcher mean of complete trials; positive means the scheme swelled the mean (added variance), negative that it shrank it",
    },
    Term {
        file: "comparison.csv",
        column: "dispersion",
        unit: "squared affine-invariant distance (unit-free)",
        meaning: "Σ ŵᵢ δ²(Cᵢ, M[oᵢ,oᵢ]): weighted mean squared distance from each trial's observed block to the mean's matching block (twice the masked cost). Lower means the mean sits closer to the trials; schemes that change the trials (loading, shrinkage) are measured against the trials as given",
    },
    Term {
        file: "comparison.csv",
        column: "notes",
        unit: "text",
        meaning: "what the scheme assumed, clipped or filled (e.g. the loading used, eigenvalues floored)",
    },
    Term {
        file: "comparison.csv",
        column: "estimated_channels",
        unit: "count",
        meaning: "channels the scheme estimates; common-channels leaves the others empty (NaN) and is not ranked against full estimates",
    },
    Term {
        file: "distances.csv",
        column: "(matrix)",
        unit: "affine-invariant distance (unit-free)",
        meaning: "δ(A, B) = ‖log(A^(−1/2) B A^(−1/2))‖_F between every two means, on the channels both estimate; 0.1 is about a 10% difference in scale along some direction",
    },
    Term {
        file: "validation.csv",
        column: "protocol, scheme, median, q1, q3",
        unit: "as the protocol's score",
        meaning: "one row per protocol and scheme: the median and the interquartile range (25th to 75th percentile) of its score over repeats or folds. Two schemes whose ranges overlap are tied: the data cannot tell them apart",
    },
    Term {
        file: "validation.csv",
        column: "simulated-dropout",
        unit: "affine-invariant distance (unit-free); lower is better",
        meaning: "complete trials get the data's own dropout patterns re-imposed; each scheme's mean of them is compared with the reference (the Karcher mean of the complete trials, or their arithmetic mean with --target population); median, q1, q3 over the repeats",
    },
    Term {
        file: "validation.csv",
        column: "held-out-fit",
        unit: "squared affine-invariant distance, or negative log-likelihood per channel (nats) with --target population; lower is better",
        meaning: "K-fold: each scheme's mean of the training trials, scored on the held-out trials' observed blocks; median, q1, q3 over folds",
    },
    Term {
        file: "validation.csv",
        column: "decoding-accuracy",
        unit: "fraction of held-out trials (0–1); higher is better",
        meaning: "K-fold minimum distance to mean: one mean per label from the training trials, each held-out trial assigned to the nearest on its observed channels; median, q1, q3 over folds (chance level in the reasons)",
    },
    Term {
        file: "validation.csv",
        column: "n, failures",
        unit: "count",
        meaning: "repeats or folds scored, and those in which the scheme could not run (a scheme with any failure is not ranked)",
    },
    Term {
        file: "contributions.csv",
        column: "channel",
        unit: "name",
        meaning: "one row per channel, for the airm-observed mean",
    },
    Term {
        file: "contributions.csv",
        column: "trials_observed",
        unit: "count",
        meaning: "trials in which the channel was observed",
    },
    Term {
        file: "contributions.csv",
        column: "weight_share",
        unit: "fraction (0–1)",
        meaning: "those trials' share of the total trial weight: how much of the data speaks about this channel",
    },
    Term {
        file: "contributions.csv",
        column: "coobserved_with",
        unit: "count",
        meaning: "other channels that at least one trial observed together with it; fewer than p − 1 means some of its covariances are set by the mean's completion, not by data",
    },
    Term {
        file: "contributions.csv",
        column: "cost_share",
        unit: "fraction (0–1), sums to 1 over channels",
        meaning: "its share of the airm-observed mean's misfit: each trial's squared tangent residual ‖log(M_o^(−1/2) Cᵢ M_o^(−1/2))‖²_F split over the residual's rows; large means the channel disagrees with the others (noise, a poor contact)",
    },
    Term {
        file: "contributions.csv",
        column: "leave_out_influence",
        unit: "affine-invariant distance (unit-free)",
        meaning: "δ between the mean and the mean re-solved without any observation of this channel, on the other channels: how much the rest of the mean leans on it",
    },
    Term {
        file: "contributions.csv",
        column: "leave_out_trials",
        unit: "trials",
        meaning: "trials the leave-one-out re-solve used: all of them, or on larger sets a seeded random subset of --leave-out-trials (then both means of the influence are that subset's)",
    },
    Term {
        file: "contributions.csv",
        column: "variance",
        unit: UNIT2,
        meaning: "the channel's variance in the airm-observed mean",
    },
    Term {
        file: "contributions.csv",
        column: "variance_q05, variance_q95",
        unit: UNIT2,
        meaning: "5th and 95th percentiles of that variance over bootstrap resamples of the trials (--bootstrap)",
    },
    Term {
        file: "contributions.csv",
        column: "correlation_sd",
        unit: "correlation (unit-free, 0–1)",
        meaning: "median over the other channels of the bootstrap standard deviation of its correlation with them: how well the data pin its relations down",
    },
];

/// The figures `lacuna mean` prints and writes to its report (every report
/// field is listed in docs/report-schema.md).
pub const MEAN: &[Term] = &[
    Term {
        file: "report",
        column: "cost",
        unit: "half a squared affine-invariant distance (unit-free)",
        meaning: "½ Σ ŵᵢ δ²(Cᵢ, M[oᵢ,oᵢ]) with weights ŵ summing to 1: the masked cost the Riemannian schemes minimise; lower means the mean fits the observed blocks better",
    },
    Term {
        file: "report",
        column: "gradient_norm",
        unit: "unit-free",
        meaning: "Frobenius norm of the cost's Riemannian gradient whitened by the mean, W⁻¹ grad F W⁻ᵀ at M = W Wᵀ (affine-invariant); converged means it fell below --tol",
    },
    Term {
        file: "report",
        column: "condition_number",
        unit: "ratio",
        meaning: "largest over smallest eigenvalue of the mean; above about 1e8 the mean is close to singular",
    },
    Term {
        file: "report",
        column: "log_det_mean",
        unit: "ln of UNIT² per channel, summed",
        meaning: "natural log of the mean's determinant; rescaling the data by s adds 2p·ln s",
    },
    Term {
        file: "report",
        column: "boundary",
        unit: "channels with shares (0–1)",
        meaning: "when no positive definite mean fits the observed blocks: the channels spanning the direction along which the iterates became singular (exit 4)",
    },
    Term {
        file: "report",
        column: "starts",
        unit: "per start: cost, iterations, verdict",
        meaning: "with --starts K: each start's final cost and whether it reached the same mean on the co-observed entries, a different local minimum, or did not converge",
    },
];

/// The unit text with the covariance unit filled in.
pub fn unit_text(term: &Term, covariance_unit: Option<&str>) -> String {
    let u = covariance_unit.unwrap_or("data unit²");
    term.unit.replace(UNIT2, u)
}

/// The terms as plain text for `--help`, grouped by file.
pub fn help_text(terms: &[Term]) -> String {
    let mut out = String::from("What the numbers mean:\n");
    let mut file = "";
    for t in terms {
        if t.file != file {
            file = t.file;
            out.push_str(&format!("  {file}\n"));
        }
        out.push_str(&format!(
            "    {} [{}]: {}.\n",
            t.column,
            unit_text(t, Some("data unit²")),
            t.meaning
        ));
    }
    out
}

/// The terms as an HTML definition list, units filled in.
pub fn html(terms: &[Term], covariance_unit: Option<&str>) -> String {
    let esc = super::svg::escape;
    let mut out = String::from("<dl class=\"glossary\">");
    for t in terms {
        out.push_str(&format!(
            "<dt><code>{}</code> <span class=\"where\">({}; {})</span></dt><dd>{}.</dd>",
            esc(t.column),
            esc(t.file),
            esc(&unit_text(t, covariance_unit)),
            esc(t.meaning)
        ));
    }
    out.push_str("</dl>");
    out
}

/// Whether `column` (a CSV header name or protocol) is defined in `terms`.
pub fn defines(terms: &[Term], column: &str) -> bool {
    terms
        .iter()
        .any(|t| t.column.split(", ").any(|c| c == column))
}

#[cfg(test)]
mod tests {
    use super::*;

    // Units are filled in on the page and never left as the placeholder in
    // --help (common practice, no source). That every column compare writes
    // is defined is checked on real output in tests/report.rs.
    #[test]
    fn units_are_filled_in() {
        assert!(html(COMPARE, Some("µV²")).contains("µV²"));
        assert!(!help_text(COMPARE).contains(UNIT2));
        assert!(defines(COMPARE, "variance_q95"));
        assert!(!defines(COMPARE, "variance_q9"));
    }
}

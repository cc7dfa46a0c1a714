//! The rank table: which trials' observed blocks are rank-deficient, and the
//! likely cause where the block itself tells.
//!
//! Causes recognised (in this order):
//! - `average-reference`: rank `k−1` and every row sums to zero, `‖C 1‖ ≤
//!   1e-8 ‖C‖_F √k` — re-referencing to the mean of the observed channels
//!   removes exactly the constant direction;
//! - `short-window`: the samples per window `T` are known and the rank is at
//!   most `T` (`T−1` when the window mean was removed) while `T ≤ k`;
//! - `other`: components removed (ICA, regression), interpolated or bridged
//!   channels — the block alone cannot tell which.
//!
//! The rank itself is the trial set's (eigenvalues above `k·ε·λ_max`).

use std::collections::BTreeMap;

use crate::trials::TrialSet;

/// One rank-deficient trial.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct DeficientTrial {
    /// Trial index (0-based).
    pub trial: usize,
    /// Channels it observed.
    pub size: usize,
    /// Numerical rank of its block.
    pub rank: usize,
    /// Likely cause: average-reference, short-window or other.
    pub cause: String,
}

/// Ranks of a trial set.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct RankTable {
    /// Trials whose block has full rank.
    pub full_rank: usize,
    /// Rank-deficient trials by cause.
    pub by_cause: BTreeMap<String, usize>,
    /// Every rank-deficient trial.
    pub deficient: Vec<DeficientTrial>,
}

/// Builds the rank table; `samples` is the samples per window when known.
pub fn rank_table(set: &TrialSet, samples: Option<usize>) -> RankTable {
    let mut deficient = Vec::new();
    let mut by_cause = BTreeMap::new();
    for i in set.rank_deficient() {
        let t = &set.trials()[i];
        let k = t.observed.len();
        let rank = set.rank(i);
        let row_sums = t.block.column_sum();
        let cause = if rank + 1 == k && row_sums.norm() <= 1e-8 * t.block.norm() * (k as f64).sqrt()
        {
            "average-reference"
        } else if samples.is_some_and(|n| n <= k && rank <= n) {
            "short-window"
        } else {
            "other"
        };
        *by_cause.entry(cause.to_string()).or_insert(0) += 1;
        deficient.push(DeficientTrial {
            trial: i,
            size: k,
            rank,
            cause: cause.into(),
        });
    }
    RankTable {
        full_rank: set.len() - deficient.len(),
        by_cause,
        deficient,
    }
}

impl RankTable {
    /// One line for the terminal, e.g. "240 of 240 trials rank-deficient
    /// (average-reference 240)"; `None` when every trial has full rank.
    pub fn summary_line(&self) -> Option<String> {
        if self.deficient.is_empty() {
            return None;
        }
        let causes: Vec<String> = self
            .by_cause
            .iter()
            .map(|(c, n)| format!("{c} {n}"))
            .collect();
        Some(format!(
            "{} of {} trials are rank-deficient ({})",
            self.deficient.len(),
            self.deficient.len() + self.full_rank,
            causes.join(", ")
        ))
    }
}

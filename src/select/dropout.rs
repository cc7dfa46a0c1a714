//! Simulated dropout: the data's own dropout patterns imposed on the
//! complete trials, each candidate's mean compared with the complete-data
//! reference.

use serde::Serialize;

use super::*;
use crate::error::Result;
use crate::trials::TrialSet;

/// Result of [`simulated_dropout`].
#[derive(Debug, Clone, Serialize)]
pub struct DropoutValidation {
    /// Channels the protocol ran on (names).
    pub channels: Vec<String>,
    /// Channels left out for lack of complete trials with them.
    pub left_out: Vec<String>,
    pub complete_trials: usize,
    /// Trials per repeat (a random subset when there are many).
    pub trials_per_repeat: usize,
    pub repeats: usize,
    /// The reference's target (centre: Karcher mean; population: arithmetic mean).
    pub target: Target,
    /// Lower is better: distance to the complete-data reference.
    pub scores: Vec<Score>,
}

/// Simulated dropout validation (see the module documentation).
pub fn simulated_dropout(
    set: &TrialSet,
    candidates: &[Candidate],
    opts: &SelectOptions,
) -> Result<DropoutValidation> {
    let s = reference_channels(set, opts.min_complete);
    let complete: Vec<usize> = (0..set.len())
        .filter(|&i| s.iter().all(|&c| set.observed(i, c)))
        .collect();
    let names: Vec<String> = s.iter().map(|&c| set.channels()[c].clone()).collect();
    let drop: Vec<usize> = (0..set.n_channels()).filter(|c| !s.contains(c)).collect();
    let selected = set.select_trials(&complete)?;
    // Dropping no channel would copy every block once more.
    let base = if drop.is_empty() {
        selected
    } else {
        selected.without_channels(&drop)?
    };
    let reference = match opts.target {
        Target::Centre => crate::schemes::Karcher.average(&base, &SchemeOptions::default())?,
        Target::Population => {
            crate::schemes::Arithmetic.average(&base, &SchemeOptions::default())?
        }
    }
    .mean;
    if crate::spd::kernels::cholesky(&reference).is_none() {
        return Err(crate::error::LacunaError::RankDeficient {
            scheme: "the simulated-dropout reference".into(),
            trial: base.rank_deficient().first().copied().unwrap_or(0),
            rank: 0,
            size: s.len(),
            count: base.rank_deficient().len(),
        });
    }
    // The data's own patterns, restricted to the reference channels.
    let patterns: Vec<Vec<usize>> = (0..set.len())
        .map(|i| {
            (0..s.len())
                .filter(|&k| set.observed(i, s[k]))
                .collect::<Vec<usize>>()
        })
        .filter(|o| o.len() >= 2)
        .collect();
    let per_repeat = complete.len().min(opts.max_trials);
    let unit = |u: usize| -> Vec<RunOutcome> {
        let mut rng = Rng::new(opts.seed ^ (0x9E37_79B9_7F4A_7C15u64.wrapping_mul(u as u64 + 1)));
        // A random subset of the complete trials, each given a random pattern.
        let mut idx: Vec<usize> = (0..base.len()).collect();
        for i in (1..idx.len()).rev() {
            idx.swap(i, rng.below(i + 1));
        }
        idx.truncate(per_repeat);
        idx.sort_unstable();
        let trials: Vec<Trial> = idx
            .iter()
            .map(|&i| {
                let t = &base.trials()[i];
                let o = if patterns.is_empty() {
                    t.observed.clone()
                } else {
                    patterns[rng.below(patterns.len())].clone()
                };
                Trial {
                    block: crate::spd::sub_block(&t.block, &o),
                    observed: o,
                }
            })
            .collect();
        let weights = idx.iter().map(|&i| base.weights()[i]).collect();
        let damaged = match TrialSet::new(names.clone(), trials, Some(weights), "simulated dropout")
        {
            Ok(d) => d,
            Err(e) => return vec![Err(e.to_string()); candidates.len()],
        };
        candidates
            .iter()
            .map(|c| {
                let m = c.run_loose(&damaged).map_err(|e| e.to_string())?;
                let est = m.diagnostics.estimated_channels.clone();
                let ch: Vec<usize> = est.clone().unwrap_or_else(|| (0..s.len()).collect());
                Ok((distance_on(&m.mean, &reference, &ch), est.map(|e| e.len())))
            })
            .collect()
    };
    let runs: Vec<Vec<RunOutcome>> = map_units(opts.repeats, side_by_side(set), |u| {
        let r = unit(u);
        opts.step();
        r
    });
    let scores = candidates
        .iter()
        .enumerate()
        .map(|(k, c)| score_of(&c.label, runs.iter().map(|r| r[k].clone())))
        .collect();
    Ok(DropoutValidation {
        left_out: drop.iter().map(|&c| set.channels()[c].clone()).collect(),
        channels: names,
        complete_trials: complete.len(),
        trials_per_repeat: per_repeat,
        repeats: opts.repeats,
        target: opts.target,
        scores,
    })
}

#[cfg(test)]
mod tests {
    use super::super::testing;
    use super::*;

    // Common practice, no source: the mean of identical matrices is that
    // matrix, so with identical trials every candidate lands on the
    // complete-data reference (distance 0 up to rounding).
    #[test]
    fn identical_trials_score_zero() {
        let set = testing::set(60, 5, 1, true);
        let opts = SelectOptions {
            repeats: 3,
            min_complete: 10,
            ..SelectOptions::default()
        };
        let d = simulated_dropout(&set, &testing::candidates(), &opts).unwrap();
        assert_eq!(d.scores.len(), 2);
        for s in &d.scores {
            let sp = s.spread.expect("ran");
            assert!(sp.median < 1e-6, "{}: {}", s.candidate, sp.median);
            assert_eq!(sp.n, 3);
        }
        assert_eq!(d.repeats, 3);
    }
}

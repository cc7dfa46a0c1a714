//! Which entries of a full-size mean the data pin down.
//!
//! Entry `X[a,b]` enters the masked cost only through trials that observe both
//! `a` and `b`. Channels no trial observes cannot be estimated at all; pairs no
//! trial observes together are left free by the cost and must be filled by a
//! stated rule (see [`super::completion`]).

use crate::trials::TrialSet;

/// Co-observation summary of a trial set.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Identifiability {
    /// `p×p` counts of trials observing both channels (diagonal: each channel).
    pub coobservation: Vec<Vec<usize>>,
    /// Channels observed in no trial.
    pub never_observed: Vec<usize>,
    /// Pairs `[a, b]`, `a < b`, both observed somewhere but never together.
    pub unconstrained_pairs: Vec<[usize; 2]>,
}

/// Computes the co-observation counts, unobserved channels and free pairs.
pub fn identifiability(set: &TrialSet) -> Identifiability {
    let counts = set.coobservation_counts();
    let p = set.n_channels();
    let never_observed: Vec<usize> = (0..p).filter(|&c| counts[c][c] == 0).collect();
    let mut unconstrained_pairs = Vec::new();
    for a in 0..p {
        for b in (a + 1)..p {
            if counts[a][b] == 0 && counts[a][a] > 0 && counts[b][b] > 0 {
                unconstrained_pairs.push([a, b]);
            }
        }
    }
    Identifiability {
        coobservation: counts,
        never_observed,
        unconstrained_pairs,
    }
}

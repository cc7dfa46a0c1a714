//! Re-centring with masks: every trial's observed block whitened by its
//! session mean's matching sub-block,
//! `C'[o,o] = M[o,o]^{-1/2} C[o,o] M[o,o]^{-1/2}` (symmetric square root),
//! so that sessions recorded with different dropouts, electrode drift or
//! gains are moved to a common centre and can be pooled (Zanini, Congedo,
//! Jutten, Said, Berthoumieu 2018, "Transfer learning: a Riemannian geometry
//! framework with applications to brain–computer interfaces", IEEE Trans.
//! Biomed. Eng. 65). Masks are kept: a channel a trial did not observe stays
//! unobserved.
//!
//! With complete trials the re-centred session's Riemannian mean is the
//! identity exactly (affine invariance of the Karcher mean). With masks it
//! is close to the identity but not exactly: the masked cost is invariant
//! only under congruences that keep the channels apart (permutations,
//! diagonal scalings), and whitening each block by its own sub-block of M
//! is not one congruence of the whole set. The masked mean of every
//! re-centred session is therefore recomputed and its distance to the
//! identity reported (docs/sessions.md).

use serde::Serialize;

use super::MeanJob;
use super::grouped::{GrandWeighting, GroupBy, GroupedMeanJob};
use crate::error::{LacunaError, Result};
use crate::schemes::{AirmObserved, AveragingScheme, SchemeOptions};
use crate::spd::functions::invsqrtm_spd;
use crate::spd::{Mat, airm_distance, sub_block, symmetrize};
use crate::trials::{Trial, TrialSet};

/// Settings: the mean job that gives each session's centre.
#[derive(Debug, Clone, Default)]
pub struct RecentreJob {
    pub mean: MeanJob,
}

/// One session's centre and how close re-centring brought it to the identity.
#[derive(Debug, Clone, Serialize)]
pub struct SessionCentre {
    pub session: String,
    pub trials: usize,
    /// The session mean's solver converged.
    pub converged: bool,
    pub iterations: usize,
    /// Channels no trial of the session observed (left out of its mean).
    pub left_out: Vec<String>,
    /// Affine-invariant distance between the masked mean of the re-centred
    /// session and the identity (0 up to rounding with complete trials).
    pub residual: f64,
}

/// The re-centred trial set and the record of every session's centre.
pub struct Recentred {
    pub set: TrialSet,
    pub sessions: Vec<SessionCentre>,
}

impl Recentred {
    /// Every session mean converged.
    pub fn converged(&self) -> bool {
        self.sessions.iter().all(|s| s.converged)
    }
}

/// Name of the one session when the trials carry none.
pub const ONE_SESSION: &str = "all trials";

impl RecentreJob {
    /// Re-centres `set` session by session (all trials as one session when
    /// the set has no sessions).
    pub fn run(&self, set: &TrialSet) -> Result<Recentred> {
        let mut grouped_set = set.clone();
        if grouped_set.sessions.is_none() {
            grouped_set.sessions = Some(vec![ONE_SESSION.to_string(); set.len()]);
        }
        let grouped = GroupedMeanJob {
            mean: self.mean.clone(),
            by: GroupBy::Session,
            grand: GrandWeighting::Trials,
        }
        .run(&grouped_set, None)?;
        let mut blocks: Vec<Option<Mat>> = vec![None; set.len()];
        let mut sessions = Vec::with_capacity(grouped.groups.len());
        for g in &grouped.groups {
            let recentred = whiten_by(set, &g.trials, &g.mean).map_err(|i| {
                LacunaError::InGroup {
                    group: g.name.clone(),
                    source: Box::new(LacunaError::trial(
                        Some(i),
                        None,
                        "observes a channel the session mean does not estimate; choose a scheme that estimates every observed channel",
                    )),
                }
            })?;
            for (&i, t) in g.trials.iter().zip(&recentred) {
                blocks[i] = Some(t.block.clone());
            }
            let residual = residual(set.channels(), recentred, &self.mean)?;
            let d = &g.run.result.diagnostics;
            sessions.push(SessionCentre {
                session: g.name.clone(),
                trials: g.trials.len(),
                converged: g.run.converged(),
                iterations: d.iterations,
                left_out: g.run.dropped.clone(),
                residual,
            });
        }
        let trials = set
            .trials()
            .iter()
            .zip(blocks)
            .map(|(t, b)| Trial {
                observed: t.observed.clone(),
                block: b.expect("every trial belongs to one session"),
            })
            .collect();
        let mut out = TrialSet::new(
            set.channels().to_vec(),
            trials,
            Some(set.weights().to_vec()),
            "the re-centred trials",
        )?;
        out.labels = set.labels.clone();
        out.sessions = set.sessions.clone();
        Ok(Recentred { set: out, sessions })
    }
}

/// The trials `idx` of `set`, each observed block C whitened by the
/// matching sub-block of `mean`: M[o,o]^{-1/2} C M[o,o]^{-1/2}. The inverse
/// square root is computed once per observation pattern (trials sharing a
/// pattern share it; the result is the same bit for bit as computing it per
/// trial) and the trials run in parallel. Err(i): trial i observes a channel
/// where `mean` is not finite.
pub fn whiten_by(
    set: &TrialSet,
    idx: &[usize],
    mean: &Mat,
) -> std::result::Result<Vec<Trial>, usize> {
    use rayon::prelude::*;
    use std::collections::BTreeMap;
    let mut patterns: BTreeMap<&[usize], usize> = BTreeMap::new();
    for &i in idx {
        let next = patterns.len();
        patterns.entry(&set.trials()[i].observed).or_insert(next);
    }
    let mut by_slot: Vec<(&[usize], usize)> = patterns.iter().map(|(o, &k)| (*o, k)).collect();
    by_slot.sort_by_key(|&(_, k)| k);
    let factors: Vec<Option<Mat>> = by_slot
        .par_iter()
        .map(|(o, _)| {
            let m = sub_block(mean, o);
            m.iter().all(|v| v.is_finite()).then(|| invsqrtm_spd(&m))
        })
        .collect();
    let out: Vec<std::result::Result<Trial, usize>> = idx
        .par_iter()
        .map(|&i| {
            let t = &set.trials()[i];
            let w = factors[patterns[t.observed.as_slice()]].as_ref().ok_or(i)?;
            Ok(Trial {
                observed: t.observed.clone(),
                block: symmetrize(&(w * &t.block * w)),
            })
        })
        .collect();
    // The first failing trial in the given order, whatever the threads did.
    out.into_iter().collect()
}

/// Distance from the identity of the masked mean of one re-centred session.
fn residual(channels: &[String], trials: Vec<Trial>, job: &MeanJob) -> Result<f64> {
    let set = TrialSet::new(channels.to_vec(), trials, None, "a re-centred session")?;
    let ident = crate::diagnose::identifiability(&set);
    let set = if ident.never_observed.is_empty() {
        set
    } else {
        set.without_channels(&ident.never_observed)?
    };
    let options = SchemeOptions {
        stop: crate::solve::StopRule {
            tol: job.tol,
            max_iter: job.max_iter.unwrap_or(500),
        },
        ..SchemeOptions::default()
    };
    let r = AirmObserved.average(&set, &options)?;
    let p = r.mean.nrows();
    Ok(airm_distance(&r.mean, &Mat::identity(p, p)))
}

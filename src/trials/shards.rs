//! One trial set from several stack files (shards), e.g. one per session or
//! one per day of a long study: `--covs 'shards/*.npy'` or a list.
//!
//! Each shard is read as by [`super::io::load_trial_set`] (its own mask and
//! weights, if any); the trials are concatenated in shard order, so a trial's
//! position in the set is its shard's offset plus its position in the shard
//! (the report lists the offsets). The shards must hold the same channels in
//! the same order; recordings with different electrode sets are pooled by
//! name with `lacuna merge` instead.

use std::path::{Path, PathBuf};

use serde::Serialize;

use super::TrialSet;
use super::io::load_trial_set;
use crate::error::{LacunaError, Result};

/// One shard's files.
#[derive(Debug, Clone)]
pub struct Shard {
    pub covs: PathBuf,
    pub mask: Option<PathBuf>,
    pub weights: Option<PathBuf>,
}

/// Where a shard's trials landed in the concatenated set.
#[derive(Debug, Clone, Serialize)]
pub struct ShardExtent {
    pub file: String,
    /// Position of the shard's first trial in the set.
    pub first_trial: usize,
    pub trials: usize,
}

fn has_wildcard(s: &str) -> bool {
    s.contains(['*', '?'])
}

/// Whether `name` matches `pattern`, where `*` stands for any run of
/// characters and `?` for one.
fn matches(pattern: &[char], name: &[char]) -> bool {
    match (pattern.first(), name.first()) {
        (None, None) => true,
        (Some('*'), _) => {
            matches(&pattern[1..], name) || (!name.is_empty() && matches(pattern, &name[1..]))
        }
        (Some('?'), Some(_)) => matches(&pattern[1..], &name[1..]),
        (Some(a), Some(b)) if a == b => matches(&pattern[1..], &name[1..]),
        _ => false,
    }
}

/// The files a path stands for: itself, or — when its file name holds `*`
/// or `?` and no file has that literal name — the regular files of its
/// folder whose names match, sorted by name. Wildcards in folder names are
/// not expanded. A pattern that matches nothing is an error naming it.
pub fn expand(path: &Path, flag: &str) -> Result<Vec<PathBuf>> {
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    if !has_wildcard(&name) || path.exists() {
        return Ok(vec![path.to_path_buf()]);
    }
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    if has_wildcard(&dir.to_string_lossy()) {
        return Err(LacunaError::InvalidOption(format!(
            "{flag} {}: wildcards are expanded in file names only, not in folders",
            path.display()
        )));
    }
    let pattern: Vec<char> = name.chars().collect();
    let entries = std::fs::read_dir(&dir).map_err(|source| LacunaError::Read {
        path: dir.clone(),
        source,
    })?;
    let mut found: Vec<PathBuf> = entries
        .filter_map(|e| e.ok())
        .filter(|e| e.file_type().is_ok_and(|t| t.is_file()))
        .filter(|e| {
            let n: Vec<char> = e.file_name().to_string_lossy().chars().collect();
            matches(&pattern, &n)
        })
        .map(|e| e.path())
        .collect();
    found.sort();
    if found.is_empty() {
        return Err(LacunaError::InvalidOption(format!(
            "{flag} {}: no file matches",
            path.display()
        )));
    }
    Ok(found)
}

/// Expands every path of a repeated flag, in the order given.
pub fn expand_all(paths: &[PathBuf], flag: &str) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for p in paths {
        out.extend(expand(p, flag)?);
    }
    Ok(out)
}

/// Pairs stacks with masks and weights by position: each of `masks` and
/// `weights` is empty or has one file per stack. A file named twice is
/// refused (its trials would count twice).
pub fn pair(covs: Vec<PathBuf>, masks: Vec<PathBuf>, weights: Vec<PathBuf>) -> Result<Vec<Shard>> {
    for (flag, list) in [("--mask", &masks), ("--weights", &weights)] {
        if !list.is_empty() && list.len() != covs.len() {
            return Err(LacunaError::InvalidOption(format!(
                "{} stack file(s) and {} {flag} file(s): give one {flag} per stack, in the same order, or none",
                covs.len(),
                list.len()
            )));
        }
    }
    let mut seen: Vec<PathBuf> = Vec::new();
    for p in covs.iter().chain(&masks).chain(&weights) {
        let key = std::fs::canonicalize(p).unwrap_or_else(|_| p.clone());
        if seen.contains(&key) {
            return Err(LacunaError::InvalidOption(format!(
                "{} is given twice: each shard's files may be named once",
                p.display()
            )));
        }
        seen.push(key);
    }
    let mut masks = masks.into_iter();
    let mut weights = weights.into_iter();
    Ok(covs
        .into_iter()
        .map(|covs| Shard {
            covs,
            mask: masks.next(),
            weights: weights.next(),
        })
        .collect())
}

/// Reads every shard and concatenates the trials (shard order kept).
pub fn load(shards: &[Shard]) -> Result<(TrialSet, Vec<ShardExtent>)> {
    let Some(first) = shards.first() else {
        return Err(LacunaError::InvalidOption("no stack file given".into()));
    };
    let first_set = load_trial_set(&first.covs, first.mask.as_deref(), first.weights.as_deref())?;
    if shards.len() == 1 {
        let extent = ShardExtent {
            file: first.covs.display().to_string(),
            first_trial: 0,
            trials: first_set.len(),
        };
        return Ok((first_set, vec![extent]));
    }
    let channels = first_set.channels().to_vec();
    let mut extents = Vec::with_capacity(shards.len());
    let mut trials = Vec::new();
    let mut weights = Vec::new();
    let mut sets = vec![first_set];
    for s in &shards[1..] {
        let set = load_trial_set(&s.covs, s.mask.as_deref(), s.weights.as_deref())?;
        if set.channels() != channels.as_slice() {
            let shown = |c: &[String]| {
                let mut s = c.iter().take(8).cloned().collect::<Vec<_>>().join(", ");
                if c.len() > 8 {
                    s.push_str(", …");
                }
                s
            };
            return Err(LacunaError::Format {
                path: s.covs.clone(),
                message: format!(
                    "this shard's {} channels ({}) differ from the first shard's {} ({}, from {}); shards must hold the same channels in the same order — pool different electrode sets by name with `lacuna merge`",
                    set.channels().len(),
                    shown(set.channels()),
                    channels.len(),
                    shown(&channels),
                    first.covs.display()
                ),
            });
        }
        sets.push(set);
    }
    let any_weights = shards.iter().any(|s| s.weights.is_some());
    for (s, set) in shards.iter().zip(sets) {
        extents.push(ShardExtent {
            file: s.covs.display().to_string(),
            first_trial: trials.len(),
            trials: set.len(),
        });
        if any_weights {
            weights.extend_from_slice(set.weights());
        }
        trials.extend(set.into_trials());
    }
    let set = TrialSet::new(
        channels,
        trials,
        any_weights.then_some(weights),
        "the shards",
    )?;
    Ok((set, extents))
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: shell-style wildcards.
    #[test]
    fn wildcards_match_like_a_shell() {
        let m = |p: &str, n: &str| {
            matches(
                &p.chars().collect::<Vec<_>>(),
                &n.chars().collect::<Vec<_>>(),
            )
        };
        assert!(m("*.npy", "day1.npy"));
        assert!(m("day?.npy", "day1.npy"));
        assert!(!m("day?.npy", "day10.npy"));
        assert!(m("*", ""));
        assert!(m("a*b*c", "aXXbYc"));
        assert!(!m("a*b*c", "aXXbY"));
        assert!(!m("*.npy", "day1.npy.bak"));
    }
}

/// Stack bytes per chunk of trials read at once (and per part of a
/// distributed evaluation): 32 MiB.
pub const CHUNK_BYTES: usize = 32 << 20;

/// Trials per chunk at `p` channels (at least one).
pub fn chunk_trials(p: usize, chunk_bytes: usize) -> usize {
    (chunk_bytes / (p * p * 8).max(1)).max(1)
}

/// One shard opened for reading in chunks: its header, mask and weights are
/// held (N·p bytes and N numbers); the covariances are read on demand.
#[derive(Debug, Clone)]
pub struct ShardReader {
    pub shard: Shard,
    n: usize,
    p: usize,
    data_start: usize,
    observed: Option<Vec<bool>>,
    channels: Vec<String>,
    weights: Option<Vec<f64>>,
}

impl ShardReader {
    /// Opens a shard: the stack's header, the mask and the weights are read
    /// and checked now; the covariances when a chunk is read.
    pub fn open(shard: &Shard) -> Result<Self> {
        let (n, p, data_start) = super::io::streamable_stack(&shard.covs)?;
        let mask = match &shard.mask {
            Some(m) => Some(super::io::read_mask(m, n, p)?),
            None => None,
        };
        let weights = match &shard.weights {
            Some(w) => Some(super::io::read_weights(w, n)?),
            None => None,
        };
        let (observed, names) = match mask {
            Some(m) => (Some(m.observed), m.channels),
            None => (None, None),
        };
        Ok(ShardReader {
            shard: shard.clone(),
            n,
            p,
            data_start,
            observed,
            channels: names.unwrap_or_else(|| super::default_channel_names(p)),
            weights,
        })
    }

    pub fn len(&self) -> usize {
        self.n
    }

    pub fn is_empty(&self) -> bool {
        self.n == 0
    }

    pub fn channels(&self) -> &[String] {
        &self.channels
    }

    /// Renames the channels (same count), as `--channels` does.
    pub fn set_channel_names(&mut self, names: Vec<String>) -> Result<()> {
        if names.len() != self.p {
            return Err(LacunaError::Format {
                path: self.shard.covs.clone(),
                message: format!(
                    "{} channel names for a stack of {} channels",
                    names.len(),
                    self.p
                ),
            });
        }
        self.channels = names;
        Ok(())
    }

    /// The chunks of `chunk_bytes` of stack, as trial ranges in order.
    pub fn chunks(&self, chunk_bytes: usize) -> Vec<std::ops::Range<usize>> {
        let step = chunk_trials(self.p, chunk_bytes);
        (0..self.n)
            .step_by(step)
            .map(|a| a..(a + step).min(self.n))
            .collect()
    }

    /// Trials `range` as a validated trial set (their weights kept raw).
    pub fn read(&self, range: std::ops::Range<usize>) -> Result<TrialSet> {
        let p = self.p;
        let trials = super::io::read_trial_range(
            &self.shard.covs,
            p,
            self.data_start,
            range.clone(),
            |i, diag| match &self.observed {
                Some(m) => (0..p).filter(|&c| m[i * p + c]).collect(),
                None => (0..p).filter(|&c| !diag[c].is_nan()).collect(),
            },
        )?;
        let mut set = TrialSet::new(
            self.channels.clone(),
            trials,
            None,
            &format!(
                "{} (trials {}–{})",
                self.shard.covs.display(),
                range.start,
                range.end.saturating_sub(1)
            ),
        )?;
        if let Some(w) = &self.weights {
            set.set_part_weights(w[range].to_vec())?;
        }
        Ok(set)
    }

    /// The whole shard's weights (raw; 1 each without a weights file).
    pub fn weight_sum_and_max(&self) -> (f64, f64) {
        match &self.weights {
            Some(w) => (w.iter().sum(), w.iter().copied().fold(0.0, f64::max)),
            None => (self.n as f64, if self.n > 0 { 1.0 } else { 0.0 }),
        }
    }
}

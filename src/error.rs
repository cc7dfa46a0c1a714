//! Typed errors for the whole library.
//!
//! Library code returns [`LacunaError`]; its variants carry data (file,
//! trial, channel, setting, value, allowed range). Only the binary turns
//! them into flag suggestions and exit codes (src/cli/errors.rs). Every variant
//! that concerns user data names the file, the trial and the channel when
//! they are known, so the message tells the user where to look.

use std::path::PathBuf;

/// One problem found while validating a trial set. Validation collects all
/// of them (up to a limit) so the user can fix a file in one pass.
#[derive(Debug, Clone, PartialEq)]
pub struct TrialProblem {
    /// 0-based trial index, when the problem belongs to one trial.
    pub trial: Option<usize>,
    /// Channel name, when the problem belongs to one channel.
    pub channel: Option<String>,
    /// What kind of problem (callers attach advice by kind, never by text).
    pub kind: ProblemKind,
    /// What is wrong, in words.
    pub message: String,
}

/// The kinds of trial problems that call for different advice.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ProblemKind {
    /// An observed block is indefinite beyond rounding (or singular where a
    /// full-rank block is needed).
    Indefinite,
    /// NaN or infinity where a value is needed.
    NonFinite,
    /// A block is not symmetric within tolerance.
    NotSymmetric,
    /// Anything else (shapes, masks, sizes).
    #[default]
    Other,
}

impl std::fmt::Display for TrialProblem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match (&self.trial, &self.channel) {
            (Some(t), Some(c)) => write!(f, "trial {t}, channel {c}: {}", self.message),
            (Some(t), None) => write!(f, "trial {t}: {}", self.message),
            (None, Some(c)) => write!(f, "channel {c}: {}", self.message),
            (None, None) => write!(f, "{}", self.message),
        }
    }
}

fn list_problems(problems: &[TrialProblem]) -> String {
    const SHOWN: usize = 20;
    let mut out = String::new();
    for p in problems.iter().take(SHOWN) {
        out.push_str("\n  - ");
        out.push_str(&p.to_string());
    }
    if problems.len() > SHOWN {
        out.push_str(&format!("\n  … and {} more", problems.len() - SHOWN));
    }
    out
}

/// Everything that can go wrong in lacuna.
#[derive(Debug, thiserror::Error)]
pub enum LacunaError {
    /// A file could not be read.
    #[error("cannot read {path}: {source}")]
    Read {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// A file could not be written (the previous content, if any, is untouched).
    #[error("cannot write {path}: {source}")]
    Write {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    /// A file is not in the expected format (NPY header, dtype, shape, CSV cell…).
    #[error("{path}: {message}")]
    Format { path: PathBuf, message: String },
    /// The data parsed but fail validation; every problem found is listed.
    #[error("{source_name}: {} problem(s) in the trial set:{}", problems.len(), list_problems(problems))]
    InvalidTrials {
        source_name: String,
        problems: Vec<TrialProblem>,
    },
    /// A scheme or option was asked for something the data cannot give.
    #[error("{0}")]
    Unsupported(String),
    /// A scheme that averages on the SPD manifold met a rank-deficient block.
    #[error(
        "scheme '{scheme}' needs full-rank observed blocks, but trial {trial} has rank {rank} of {size} ({count} rank-deficient trial(s) in all)"
    )]
    RankDeficient {
        scheme: String,
        trial: usize,
        rank: usize,
        size: usize,
        count: usize,
    },
    /// A setting outside its accepted range (named as in the library,
    /// e.g. `tol`, `max_iter`; the command line shows its flag instead).
    #[error("{setting} must be {allowed}, got {value}")]
    OutOfRange {
        setting: String,
        value: String,
        allowed: String,
    },
    /// A name that is not one of the accepted ones.
    #[error("{setting}: '{value}' is not one of: {}", valid.join(", "))]
    UnknownName {
        setting: String,
        value: String,
        valid: Vec<String>,
        /// The closest valid name, when one is close.
        closest: Option<String>,
    },
    /// A setting another setting or the data need.
    #[error("{needed_for} needs the setting '{setting}'")]
    MissingSetting { setting: String, needed_for: String },
    /// A channel no trial observed: its variance cannot be estimated.
    #[error(
        "channel {channel} is observed in no trial ({count} such channel(s)); its variance cannot be estimated"
    )]
    NeverObserved { channel: String, count: usize },
    /// Settings that cannot go together, or another usage problem.
    #[error("invalid option: {0}")]
    InvalidOption(String),
    /// A numerical routine failed (not positive definite mid-iteration, NaN…).
    #[error("numerical failure: {0}")]
    Numerical(String),
    /// An error another process of a distributed run met (its message, as
    /// that process would have printed it, and its exit code).
    #[error("process {rank}: {message}")]
    OnProcess {
        rank: usize,
        exit_code: i32,
        message: String,
    },
    /// An error met while working on one group of trials (a condition, a
    /// session): the group is named, the cause kept as it is.
    #[error("group '{group}': {source}")]
    InGroup {
        group: String,
        #[source]
        source: Box<LacunaError>,
    },
}

impl LacunaError {
    /// Shorthand for a single trial problem with no file context yet.
    pub fn trial(
        trial: Option<usize>,
        channel: Option<String>,
        message: impl Into<String>,
    ) -> Self {
        LacunaError::InvalidTrials {
            source_name: "input".into(),
            problems: vec![TrialProblem {
                kind: ProblemKind::Other,
                trial,
                channel,
                message: message.into(),
            }],
        }
    }
}

/// Result alias used across the crate.
pub type Result<T> = std::result::Result<T, LacunaError>;

/// `lo ≤ v ≤ hi` and finite, or an [`LacunaError::OutOfRange`] naming the setting.
pub fn float_in(setting: &str, v: f64, (lo, hi): (f64, f64)) -> Result<()> {
    if v.is_finite() && v >= lo && v <= hi {
        Ok(())
    } else {
        Err(LacunaError::OutOfRange {
            setting: setting.into(),
            value: v.to_string(),
            allowed: format!("a finite number between {lo:e} and {hi:e}"),
        })
    }
}

/// `lo ≤ v ≤ hi` for counts.
pub fn int_in(setting: &str, v: usize, (lo, hi): (usize, usize)) -> Result<()> {
    if v >= lo && v <= hi {
        Ok(())
    } else {
        Err(LacunaError::OutOfRange {
            setting: setting.into(),
            value: v.to_string(),
            allowed: format!("between {lo} and {hi}"),
        })
    }
}

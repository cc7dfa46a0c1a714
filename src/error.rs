//! Typed errors for the whole library.
//!
//! Library code returns [`LacunaError`]; only the binary turns it into a
//! message and an exit code (see [`LacunaError::exit_code`]). Every variant
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
    /// What is wrong, in words.
    pub message: String,
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
    if problems
        .iter()
        .any(|p| p.message.contains("not positive definite"))
    {
        out.push_str("\nhint: windows shorter than the channel count, average referencing and interpolation make covariances singular; estimate them with shrinkage from the recordings (`lacuna extract --estimator oas`), or mark the dependent channel as unobserved in the mask");
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
        "scheme '{scheme}' needs full-rank observed blocks, but trial {trial} has rank {rank} of {size} ({count} rank-deficient trial(s) in all). Regularise first (--regularize shrinkage:0.1, loading:0.01, or oas with --samples T), or choose a scheme that takes such windows: shrinkage, diagonal-loading, gaussian-em, available-case, subspace"
    )]
    RankDeficient {
        scheme: String,
        trial: usize,
        rank: usize,
        size: usize,
        count: usize,
    },
    /// An option value is out of range.
    #[error("invalid option: {0}")]
    InvalidOption(String),
    /// A numerical routine failed (not positive definite mid-iteration, NaN…).
    #[error("numerical failure: {0}")]
    Numerical(String),
}

impl LacunaError {
    /// Exit code contract (GUIDE §4): 3 for invalid input data, 4 for a
    /// numerical failure, 2 for usage errors, 1 for output I/O failures.
    pub fn exit_code(&self) -> i32 {
        match self {
            LacunaError::Read { .. }
            | LacunaError::Format { .. }
            | LacunaError::InvalidTrials { .. }
            | LacunaError::Unsupported(_)
            | LacunaError::RankDeficient { .. } => 3,
            LacunaError::InvalidOption(_) => 2,
            LacunaError::Numerical(_) => 4,
            LacunaError::Write { .. } => 1,
        }
    }

    /// Shorthand for a single trial problem with no file context yet.
    pub fn trial(
        trial: Option<usize>,
        channel: Option<String>,
        message: impl Into<String>,
    ) -> Self {
        LacunaError::InvalidTrials {
            source_name: "input".into(),
            problems: vec![TrialProblem {
                trial,
                channel,
                message: message.into(),
            }],
        }
    }
}

/// Result alias used across the crate.
pub type Result<T> = std::result::Result<T, LacunaError>;

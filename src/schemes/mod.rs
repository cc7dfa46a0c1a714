//! Averaging schemes: one question — "what is the mean covariance of these
//! trials?" — answered many ways on the same data.
//!
//! Every scheme implements [`AveragingScheme`]: it takes the validated
//! [`TrialSet`] and [`SchemeOptions`] and returns a full-size `p×p` SPD mean
//! with its own [`Diagnostics`]. Diagnostics and selection code read these
//! results; they never reach into a scheme's internals.
//!
//! To add a scheme: write a file here with a unit struct implementing the
//! trait, then list it in [`all_schemes`] (see DEVELOPERS.md).

mod airm_observed;
mod alternatives;
mod closed_form;
mod common_channels;
mod em;
mod id;
mod karcher;
mod rare_rows;
pub mod regularize;
mod robust;
mod spherical_spline;
mod subspace;

use std::sync::Arc;

pub use airm_observed::{AirmObserved, InitRule, MaskedKarcherProblem};
pub use alternatives::{AvailableCase, CompleteTrials, DiagonalLoading, Shrinkage, pairwise_mean};
pub use closed_form::{Arithmetic, Harmonic, LogEuclidean};
pub use common_channels::CommonChannels;
pub use em::GaussianEm;
pub use id::SchemeId;
pub use karcher::Karcher;
pub use robust::{ObservedHuber, ObservedMedian, observed_distances, outlier_trials, outliers};
pub use spherical_spline::{
    SphericalSpline, spline_g as spherical_spline_g, spline_interpolation_matrix,
};
pub use subspace::Subspace;

use crate::error::Result;
use crate::solve::{IterRecord, Solution, StopReason, StopRule};
use crate::spd::Mat;
use crate::trials::TrialSet;

/// Accepted range of `diagonal-loading`'s λ (inclusive).
pub const LOADING_RANGE: (f64, f64) = (1e-300, 1e6);
/// Accepted range of `shrinkage`'s α (inclusive).
pub const SHRINKAGE_RANGE: (f64, f64) = (1e-300, 1.0);

/// Progress callback, called after every accepted iteration.
pub type Observer = Arc<dyn Fn(&IterRecord) + Send + Sync>;

/// Options shared by all schemes (each uses what applies to it).
#[derive(Clone)]
pub struct SchemeOptions {
    /// Stopping rule for iterative schemes.
    pub stop: StopRule,
    /// Starting point rule for the masked mean.
    pub init: InitRule,
    /// Number of starts for the masked mean's multi-start check (1 = off).
    pub starts: usize,
    /// Seed for anything random (extra starts).
    pub seed: u64,
    /// Called after every accepted iteration (progress display).
    pub observer: Option<Observer>,
    /// λ of `diagonal-loading` (load = λ·trace/p).
    pub loading: f64,
    /// α of `shrinkage`, in (0, 1].
    pub shrinkage: f64,
    /// Samples per trial, when known: `shrinkage` then takes each trial's
    /// OAS intensity instead of the fixed α.
    pub samples: Option<usize>,
    /// Rank of `subspace` (None = the documented rule).
    pub rank: Option<usize>,
    /// Electrode positions on the unit sphere by channel name (for
    /// `spherical-spline`; by name so that channel subsets keep working).
    pub positions: Option<Arc<std::collections::BTreeMap<String, [f64; 3]>>>,
    /// A starting point for `airm-observed` and the schemes that end in a
    /// Karcher mean of full-size matrices (re-solves after small changes to
    /// the data: leave-one-channel-out, bootstrap, validation folds). Used
    /// only when its size is the set's channel count (and, for the Karcher
    /// schemes, it is positive definite); a scheme that averages in other
    /// coordinates (`subspace`) ignores it.
    pub warm_start: Option<Arc<Mat>>,
    /// Regularise every observed block before averaging (regularise-then-average).
    pub regularize: Option<regularize::Regularizer>,
    /// Degrees of freedom `n` of the trial covariances: when set, schemes
    /// that support it ([`AveragingScheme::corrects_scale`]) divide each
    /// observed block by `e^{c(k_i, n)}` first, so that the Riemannian mean
    /// estimates the population covariance (src/spd/wishart.rs).
    pub scale_correction: Option<f64>,
    /// Huber threshold of `airm-observed-huber` as a multiple of the median
    /// distance of the trials to the squared-distance masked mean.
    pub huber: f64,
    /// Precondition the masked mean's solver when channels are covered
    /// unequally (docs/masked-mean.md, "Preconditioning"). On by default;
    /// off reproduces the plain L-BFGS run (for checks and benchmarks).
    pub precondition: bool,
    /// With `precondition`, eliminate the rows of rarely observed channels
    /// exactly for each step of the others' block when the set suits it
    /// (docs/masked-mean.md, "Rarely observed channels"). On by default;
    /// off leaves the band-fitted preconditioner alone (checks, benchmarks).
    pub eliminate_rare: bool,
}

impl Default for SchemeOptions {
    fn default() -> Self {
        SchemeOptions {
            stop: StopRule::default(),
            init: InitRule::AvailableCase,
            starts: 1,
            seed: 0,
            observer: None,
            loading: 1e-2,
            shrinkage: 0.1,
            samples: None,
            rank: None,
            positions: None,
            warm_start: None,
            regularize: None,
            scale_correction: None,
            huber: 1.5,
            precondition: true,
            eliminate_rare: true,
        }
    }
}

impl std::fmt::Debug for SchemeOptions {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SchemeOptions")
            .field("stop", &self.stop)
            .field("init", &self.init)
            .field("starts", &self.starts)
            .field("seed", &self.seed)
            .field("loading", &self.loading)
            .field("shrinkage", &self.shrinkage)
            .field("samples", &self.samples)
            .field("rank", &self.rank)
            .field("positions", &self.positions.as_ref().map(|p| p.len()))
            .field("warm_start", &self.warm_start.is_some())
            .field("regularize", &self.regularize)
            .field("scale_correction", &self.scale_correction)
            .field("precondition", &self.precondition)
            .field("eliminate_rare", &self.eliminate_rare)
            .finish()
    }
}

/// One start of a multi-start run.
#[derive(Debug, Clone, serde::Serialize)]
pub struct StartOutcome {
    /// How the start was made.
    pub init: String,
    /// Final cost from that start.
    pub cost: f64,
    /// Iterations it took.
    pub iterations: usize,
    /// Whether it met the tolerance.
    pub converged: bool,
    /// Affine-invariant distance of its result to the reported mean.
    pub distance_to_reported: f64,
    /// Largest difference from the reported mean over the entries the data
    /// pin (co-observed pairs), relative to `sqrt(X_aa X_bb)`.
    pub determined_difference: f64,
    /// How this start ended, in words: "same mean", "different local
    /// minimum", "did not converge" or "ran to the boundary".
    pub verdict: String,
}

/// What a scheme reports about how it got its mean.
#[derive(Debug, Clone, serde::Serialize)]
pub struct Diagnostics {
    /// True for iterative schemes.
    pub iterative: bool,
    /// For iterative schemes: the stopping rule on the gradient was met.
    /// Closed-form schemes are always `true`.
    pub converged: bool,
    /// Why the solver stopped (iterative schemes only).
    pub stop_reason: Option<StopReason>,
    /// Accepted iterations (0 for closed forms).
    pub iterations: usize,
    /// Cost evaluations, line-search trials included.
    pub evaluations: usize,
    /// Final value of the scheme's own cost, if it has one.
    pub cost: Option<f64>,
    /// Final whitened Riemannian gradient norm (iterative schemes).
    pub gradient_norm: Option<f64>,
    /// The tolerance the gradient norm was held to.
    pub tolerance: Option<f64>,
    /// Per-iteration trace.
    pub trace: Vec<IterRecord>,
    /// What the scheme had to assume or change, in words.
    pub notes: Vec<String>,
    /// Channel pairs `[a, b]` (a < b) that no trial observes together.
    pub unconstrained_pairs: Vec<[usize; 2]>,
    /// How many of those the scheme filled by max-determinant completion.
    pub completed_pairs: usize,
    /// Multi-start outcomes, when asked for.
    pub starts: Vec<StartOutcome>,
    /// Whether all starts reached the same mean (None when only one start).
    pub starts_agree: Option<bool>,
    /// Channels the mean actually estimates (None = all). Entries outside
    /// are placeholders; comparisons use the estimated block only.
    pub estimated_channels: Option<Vec<usize>>,
    /// Set when the iterates ran to the boundary of the SPD cone (the cost
    /// has no positive definite minimiser): the direction that vanishes.
    pub boundary: Option<VanishingDirection>,
    /// Trials whose distance to this mean is an outlier (robust schemes
    /// only; empty elsewhere).
    pub outliers: Vec<OutlierTrial>,
}

/// A trial far from the mean by the modified z-score of its distance.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct OutlierTrial {
    /// Position in the trial set (0-based, the order of the stack).
    pub trial: usize,
    /// Affine-invariant distance of its observed block to the mean's.
    pub distance: f64,
    /// Modified z-score 0.6745 (δ − median δ) / MAD.
    pub z: f64,
}

/// The direction along which a run to the boundary makes the mean singular.
#[derive(Debug, Clone, serde::Serialize)]
pub struct VanishingDirection {
    /// Smallest eigenvalue of the returned mean's correlation matrix.
    pub min_correlation_eigenvalue: f64,
    /// Channels carrying the eigenvector, largest share first, with the share
    /// of its squared length (shares of at least 5% are listed).
    pub channels: Vec<(usize, f64)>,
}

impl VanishingDirection {
    /// The smallest-eigenvalue direction of the correlation matrix of `x`.
    pub fn of(x: &Mat) -> Self {
        let p = x.nrows();
        let d: Vec<f64> = (0..p).map(|a| x[(a, a)].max(f64::MIN_POSITIVE)).collect();
        let r = Mat::from_fn(p, p, |a, b| x[(a, b)] / (d[a] * d[b]).sqrt());
        let e = crate::spd::kernels::sym_eigen(&crate::spd::symmetrize(&r));
        let v = e.vectors.column(0);
        let mut channels: Vec<(usize, f64)> = (0..p)
            .map(|c| (c, v[c] * v[c]))
            .filter(|&(_, s)| s >= 0.05)
            .collect();
        channels.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
        VanishingDirection {
            min_correlation_eigenvalue: e.values[0],
            channels,
        }
    }
}

impl Diagnostics {
    /// Diagnostics of a closed-form scheme.
    pub fn closed_form(notes: Vec<String>) -> Self {
        Diagnostics {
            iterative: false,
            converged: true,
            stop_reason: None,
            iterations: 0,
            evaluations: 0,
            cost: None,
            gradient_norm: None,
            tolerance: None,
            trace: Vec::new(),
            notes,
            unconstrained_pairs: Vec::new(),
            completed_pairs: 0,
            starts: Vec::new(),
            starts_agree: None,
            estimated_channels: None,
            boundary: None,
            outliers: Vec::new(),
        }
    }

    /// Diagnostics from a solver run.
    pub fn from_solution(sol: &Solution, tol: f64) -> Self {
        Diagnostics {
            iterative: true,
            converged: sol.converged(),
            stop_reason: Some(sol.reason),
            iterations: sol.iterations,
            evaluations: sol.evaluations,
            cost: Some(sol.cost),
            gradient_norm: Some(sol.gradient_norm),
            tolerance: Some(tol),
            trace: sol.trace.clone(),
            ..Diagnostics::closed_form(Vec::new())
        }
    }
}

/// A scheme's answer: the full-size mean and how it was obtained.
#[derive(Debug, Clone)]
pub struct MeanResult {
    /// Scheme name.
    pub scheme: String,
    /// The `p×p` SPD mean, over the trial set's channels.
    pub mean: Mat,
    /// How it was obtained.
    pub diagnostics: Diagnostics,
}

impl MeanResult {
    /// The mean as written to files: entries outside the estimated channels
    /// (see [`Diagnostics::estimated_channels`]) are NaN, so no one mistakes
    /// a placeholder for an estimate. Identical to `mean` when every channel
    /// is estimated.
    pub fn published(&self) -> Mat {
        let Some(est) = &self.diagnostics.estimated_channels else {
            return self.mean.clone();
        };
        let p = self.mean.nrows();
        let mut keep = vec![false; p];
        for &c in est {
            if c < p {
                keep[c] = true;
            }
        }
        Mat::from_fn(p, p, |a, b| {
            if keep[a] && keep[b] {
                self.mean[(a, b)]
            } else {
                f64::NAN
            }
        })
    }
}

/// The one question every scheme answers.
pub trait AveragingScheme: Sync + Send {
    /// Which scheme this is.
    fn id(&self) -> SchemeId;
    /// Name used on the command line and in reports.
    fn name(&self) -> &'static str {
        self.id().name()
    }
    /// Checks the settings this scheme reads, before any work; a value out
    /// of range is an error naming the setting, never silently changed.
    fn check(&self, options: &SchemeOptions) -> Result<()> {
        options.stop.check()
    }
    /// One sentence for `--help` and reports.
    fn summary(&self) -> &'static str;
    /// Whether the scheme accepts trials with unobserved channels.
    fn handles_missing(&self) -> bool;
    /// Whether the scheme accepts rank-deficient observed blocks. Schemes
    /// that average on the SPD manifold need full rank (default `false`);
    /// regularising and Euclidean schemes override this.
    fn accepts_rank_deficient(&self) -> bool {
        false
    }
    /// Whether the scheme is a Riemannian (Karcher-type) mean whose
    /// short-window scale bias `options.scale_correction` can remove.
    fn corrects_scale(&self) -> bool {
        false
    }
    /// Computes the mean from a set that passed the shared checks of
    /// [`AveragingScheme::average`]. Call `average`, not this.
    fn compute(&self, trials: &TrialSet, options: &SchemeOptions) -> Result<MeanResult>;

    /// Computes the mean: applies `options.regularize` (if any), refuses
    /// rank-deficient blocks when the scheme needs full rank (naming the
    /// trial, its rank and the regularisers that would serve), then runs the
    /// scheme. The regulariser is recorded in the notes.
    fn average(&self, trials: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        self.check(options)?;
        let regularised;
        let mut note = None;
        let set = match &options.regularize {
            Some(r) => {
                let (s, n) = r.apply(trials)?;
                regularised = s;
                note = Some(n);
                &regularised
            }
            None => trials,
        };
        let corrected;
        let set = match options.scale_correction {
            Some(n) => {
                if !self.corrects_scale() {
                    return Err(crate::error::LacunaError::InvalidOption(format!(
                        "the scale-bias correction applies to Riemannian means (airm-observed, airm), not to '{}'",
                        self.name()
                    )));
                }
                if options.regularize.is_some() {
                    return Err(crate::error::LacunaError::InvalidOption(
                        "the scale-bias correction assumes Wishart sample covariances; it cannot follow a regulariser".into(),
                    ));
                }
                let (s, n_note) = scale_corrected(set, n)?;
                corrected = s;
                note = Some(match note {
                    Some(prev) => format!("{prev}; {n_note}"),
                    None => n_note,
                });
                &corrected
            }
            None => set,
        };
        if !self.accepts_rank_deficient() {
            let deficient = set.rank_deficient();
            if let Some(&i) = deficient.first() {
                return Err(crate::error::LacunaError::RankDeficient {
                    scheme: self.name().to_string(),
                    trial: i,
                    rank: set.rank(i),
                    size: set.trials()[i].observed.len(),
                    count: deficient.len(),
                });
            }
        }
        let mut r = self.compute(set, options)?;
        if let Some(n) = note {
            r.diagnostics.notes.insert(0, n);
        }
        Ok(r)
    }
}

/// Every scheme lacuna knows, in the order they are listed to users.
pub fn all_schemes() -> Vec<Box<dyn AveragingScheme>> {
    SchemeId::ALL.into_iter().map(SchemeId::scheme).collect()
}

/// Looks a scheme up by name.
pub fn scheme_by_name(name: &str) -> Option<Box<dyn AveragingScheme>> {
    SchemeId::from_name(name).map(SchemeId::scheme)
}

/// Divides every observed block by `e^{c(k_i, n)}` (the expected scale
/// bias of a Riemannian mean of sample covariances with `n` degrees of
/// freedom); returns the set and a note with the factors used.
pub fn scale_corrected(set: &TrialSet, n: f64) -> Result<(TrialSet, String)> {
    use crate::spd::wishart::log_scale_bias;
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    let mut factors = Vec::with_capacity(set.len());
    for (i, t) in set.trials().iter().enumerate() {
        let k = t.observed.len();
        let c = log_scale_bias(k, n).ok_or_else(|| {
            crate::error::LacunaError::InvalidOption(format!(
                "the scale-bias correction needs more degrees of freedom than channels minus one: trial {i} observes {k} channels, n = {n}"
            ))
        })?;
        let f = (-c).exp();
        lo = lo.min(f);
        hi = hi.max(f);
        factors.push(f);
    }
    let out = set.map_blocks("scale-corrected trials", |i, t| &t.block * factors[i])?;
    let range = if (hi - lo).abs() <= 1e-12 * hi {
        format!("{lo:.4}")
    } else {
        format!("{lo:.4}–{hi:.4} (by block size)")
    };
    Ok((
        out,
        format!(
            "scale-bias correction for n = {n} degrees of freedom: every observed block multiplied by e^-c(k, n) = {range}, so the mean estimates the population covariance (exact in expectation for Gaussian, independent samples)"
        ),
    ))
}

/// The scheme name closest to `name` by edit distance (for "did you mean"),
/// if one is within a third of the name's length.
pub fn closest_scheme_name(name: &str) -> Option<&'static str> {
    let names: Vec<&'static str> = all_schemes().iter().map(|s| s.name()).collect();
    names
        .into_iter()
        .map(|n| (edit_distance(name, n), n))
        .min()
        .filter(|&(d, n)| d <= n.len().max(3) / 3)
        .map(|(_, n)| n)
}

/// Levenshtein distance between two strings (by characters).
fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut prev = row[0];
        row[0] = i + 1;
        for (j, &cb) in b.iter().enumerate() {
            let cur = row[j + 1];
            row[j + 1] = (prev + usize::from(ca != cb)).min(row[j] + 1).min(cur + 1);
            prev = cur;
        }
    }
    row[b.len()]
}

/// Weighted sum `Σ ŵ_i f(C_i)` over complete trials, reduced in a fixed order.
pub(crate) fn weighted_sum(
    blocks: &[&Mat],
    weights: &[f64],
    f: impl Fn(&Mat) -> Mat + Sync + Send,
) -> Mat {
    let p = blocks[0].nrows();
    let parts = crate::solve::chunked(blocks.len(), 32, |r| {
        let mut acc = Mat::zeros(p, p);
        for i in r {
            acc += f(blocks[i]) * weights[i];
        }
        acc
    });
    parts.into_iter().fold(Mat::zeros(p, p), |a, b| a + b)
}

//! Riemannian optimisation on the SPD manifold, kept apart from the problems.
//!
//! A problem ([`SpdProblem`]) knows its cost and gradient; the solver
//! ([`lbfgs::minimize`]) knows line search, memory, stopping and tracing.
//!
//! **Coordinates.** The solver carries a factor `W` of the iterate, `X = W Wᵀ`,
//! and works with *whitened* tangent vectors `ξ̃ = W⁻¹ ξ W⁻ᵀ`, in which the
//! affine-invariant metric is the plain Frobenius inner product. A step along
//! `d̃` moves to `X(t) = W exp(t d̃) Wᵀ` (the exponential map) and the factor
//! is updated to `W exp(t d̃ / 2)`. With that choice, keeping whitened
//! coordinates unchanged from one iterate to the next *is* parallel transport
//! along the geodesic just travelled (Sra & Hosseini 2015, "Conic geometric
//! optimization on the manifold of positive definite matrices", SIAM J.
//! Optim., give `E = X^{1/2} exp(X^{-1/2} ξ X^{-1/2}/2) X^{-1/2}`), so the
//! L-BFGS memory needs no explicit transport.

pub mod fibre;
pub mod lbfgs;

use crate::spd::Mat;

/// Cost and gradient at an iterate.
#[derive(Debug, Clone)]
pub struct Evaluation {
    /// Cost `F(X)`.
    pub cost: f64,
    /// Riemannian gradient in whitened coordinates, `W⁻¹ grad F(X) W⁻ᵀ = Wᵀ ∇F(X) W`.
    pub grad: Mat,
    /// Suggested first step length for a steepest-descent step (e.g. the
    /// Bini–Iannazzo step for Karcher-type costs), if the problem knows one.
    pub step_hint: Option<f64>,
}

/// A smooth cost on SPD matrices.
pub trait SpdProblem: Sync {
    /// Matrix size `p`.
    fn size(&self) -> usize;
    /// Evaluates at `X = W Wᵀ`. Returns `None` when the cost is undefined
    /// there (a sub-block not positive definite numerically), which the line
    /// search treats as "step too long".
    fn evaluate(&self, w: &Mat) -> Option<Evaluation>;
    /// Moves `X` along directions the cost cannot see (entries no term depends
    /// on) to one canonical representative, or `None` when the cost has no
    /// such directions. Must leave the cost *and* the Euclidean gradient
    /// unchanged, so the solver can carry its gradient over without a new
    /// evaluation. Without it a flat direction lets the iterates drift
    /// towards the boundary of the cone, where progress stalls.
    fn canonical(&self, _x: &Mat) -> Option<Mat> {
        None
    }
    /// An approximation of the inverse Hessian at `X = W Wᵀ` for the
    /// solver's initial L-BFGS matrix, or `None` for the identity.
    fn preconditioner(&self, _w: &Mat) -> Option<Preconditioner> {
        None
    }
}

/// A symmetric positive definite operator on whitened tangent vectors,
/// `P(g) = B ((Bᵀ g B) ∘ S) Bᵀ` with `B` orthogonal and `S` symmetric with
/// positive entries: entrywise scaling in an orthonormal basis. Used as the
/// L-BFGS initial inverse Hessian, it keeps every direction a descent
/// direction (⟨g, P g⟩ = Σ S_ab (Bᵀ g B)_ab² > 0 for g ≠ 0).
#[derive(Debug, Clone)]
pub struct Preconditioner {
    /// Orthogonal `p×p` basis.
    pub basis: Mat,
    /// Positive symmetric scale per entry in that basis.
    pub scale: Mat,
}

impl Preconditioner {
    /// Entries whose scale is within this factor of the median scale form
    /// band 0; each further factor opens a band of its own.
    pub const BAND_RATIO: f64 = 4.0;
    /// A band's fitted factor stays within this ratio of the overall one, so
    /// a band the newest step barely touched cannot swing the operator.
    pub const BAND_FACTOR_LIMIT: f64 = 1e3;

    /// Applies the operator.
    pub fn apply(&self, g: &Mat) -> Mat {
        let b = &self.basis;
        let inner = b.transpose() * g * b;
        let scaled = inner.component_mul(&self.scale);
        crate::spd::symmetrize(&(b * scaled * b.transpose()))
    }

    /// Band of each entry of `scale` (column-major): 0 up to
    /// `BAND_RATIO` × the median scale, then one band per further factor.
    fn bands(&self) -> Vec<usize> {
        let mut sorted: Vec<f64> = self.scale.iter().copied().collect();
        sorted.sort_by(f64::total_cmp);
        let floor = Self::BAND_RATIO * sorted[sorted.len() / 2];
        self.scale
            .iter()
            .map(|&v| {
                if v <= floor {
                    0
                } else {
                    1 + ((v / floor).ln() / Self::BAND_RATIO.ln()) as usize
                }
            })
            .collect()
    }

    /// The operator rescaled band by band to the newest memory pair `(s, y)`
    /// (`⟨s, y⟩ > 0`): each band's scale is multiplied by its own
    /// Barzilai–Borwein factor `γ_k = ⟨s, y⟩_k / ⟨y, P y⟩_k`, the sums taken
    /// over the band's entries in the basis. One factor for the whole
    /// operator (the usual choice) must compromise between well-covered and
    /// weakly pinned entries, whose curvature the model misjudges by
    /// different amounts far from the optimum (measured: by factors 5 and
    /// 100 on a rare-channel set); a band without a positive estimate keeps
    /// the overall factor. Still symmetric positive definite: every scale
    /// stays positive.
    pub fn fitted_to(&self, s: &Mat, y: &Mat) -> Preconditioner {
        let b = &self.basis;
        let sb = b.transpose() * s * b;
        let yb = b.transpose() * y * b;
        let bands = self.bands();
        let n_bands = bands.iter().copied().max().unwrap_or(0) + 1;
        let (mut sy, mut ypy) = (vec![0.0; n_bands], vec![0.0; n_bands]);
        for (i, &k) in bands.iter().enumerate() {
            sy[k] += sb[i] * yb[i];
            ypy[k] += yb[i] * yb[i] * self.scale[i];
        }
        let overall = sy.iter().sum::<f64>() / ypy.iter().sum::<f64>();
        let lim = Self::BAND_FACTOR_LIMIT;
        let factor: Vec<f64> = (0..n_bands)
            .map(|k| {
                let g = sy[k] / ypy[k];
                if g > 0.0 && g.is_finite() && overall > 0.0 {
                    g.clamp(overall / lim, overall * lim)
                } else {
                    overall
                }
            })
            .collect();
        let mut scale = self.scale.clone();
        for (v, &k) in scale.iter_mut().zip(&bands) {
            *v *= factor[k];
        }
        Preconditioner {
            basis: self.basis.clone(),
            scale,
        }
    }
}

/// When to stop, and how to report it.
#[derive(Debug, Clone)]
pub struct StopRule {
    /// Stop when the whitened gradient norm `‖W⁻¹ grad F W⁻ᵀ‖_F` is at or below this.
    pub tol: f64,
    /// Hard cap on accepted iterations.
    pub max_iter: usize,
}

impl Default for StopRule {
    fn default() -> Self {
        StopRule {
            tol: 1e-10,
            max_iter: 500,
        }
    }
}

impl StopRule {
    /// Accepted ranges (inclusive) of the tolerance and the iteration cap.
    pub const TOL: (f64, f64) = (1e-300, 0.1);
    pub const MAX_ITER: (usize, usize) = (1, 1_000_000);

    /// Both settings in range, or an error naming the one that is not.
    pub fn check(&self) -> crate::Result<()> {
        crate::error::float_in("tol", self.tol, Self::TOL)?;
        crate::error::int_in("max_iter", self.max_iter, Self::MAX_ITER)
    }
}

/// One line of the convergence trace.
#[derive(Debug, Clone, serde::Serialize, serde::Deserialize)]
pub struct IterRecord {
    /// Iteration number (0 = the starting point).
    pub iteration: usize,
    /// Cost at this iterate.
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub cost: f64,
    /// Whitened Riemannian gradient norm at this iterate.
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub gradient_norm: f64,
    /// Step length accepted to reach this iterate (0 for the start).
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub step: f64,
    /// Cost evaluations spent so far.
    pub evaluations: usize,
    /// Smallest eigenvalue of the iterate's correlation matrix
    /// `D^{-1/2} X D^{-1/2}` (`D = diag X`): 1 for a diagonal iterate, towards
    /// 0 as it approaches the boundary of the cone. Unit-free; NaN when the
    /// solver does not track it.
    #[serde(deserialize_with = "crate::nullable::f64")]
    pub min_correlation_eigenvalue: f64,
}

/// Why the solver stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// The gradient norm met the tolerance.
    Tolerance,
    /// The iteration cap was reached first.
    MaxIterations,
    /// No step along a descent direction decreased the cost: the iterate sits
    /// at the floor set by rounding; the gradient norm tells how close.
    LineSearchStalled,
    /// The iterates ran towards the boundary of the SPD cone while the cost
    /// kept decreasing: the cost has no minimiser among positive definite
    /// matrices (see [`boundary`] for the criterion). The last iterate that
    /// is safely positive definite is returned.
    Boundary,
}

/// The documented criterion that tells a run to the boundary of the cone from
/// convergence to an ill-conditioned minimiser (docs/masked-mean.md).
pub mod boundary {
    /// An iterate whose correlation matrix has a smallest eigenvalue at or
    /// below this is numerically singular: the solver stops there at once.
    pub const HARD_FLOOR: f64 = 1e-12;
    /// Below this smallest correlation eigenvalue a run is examined for a trend.
    pub const SUSPECT: f64 = 1e-6;
    /// A fall by at least this factor over the second half of the run, ending
    /// below [`SUSPECT`], is a run to the boundary: near a true minimiser the
    /// late iterates barely move, so their spectrum is stable.
    pub const FALL: f64 = 100.0;
    /// Fewest accepted iterations for the trend test.
    pub const MIN_ITERATIONS: usize = 6;
    /// A preconditioned run (whose trial points at the numerical boundary
    /// count as steps too long, so it cannot reach [`HARD_FLOOR`]) that sits
    /// below [`SUSPECT`] without a new lowest gradient norm for this many
    /// iterations is pressed against the boundary, not converging.
    pub const STALL: usize = 50;

    /// Applies the trend test to a trace of smallest correlation eigenvalues.
    pub fn trend(trace: &[f64]) -> bool {
        let n = trace.len();
        if n <= MIN_ITERATIONS {
            return false;
        }
        let last = trace[n - 1];
        let mid = trace[(n - 1) / 2];
        last < SUSPECT && last * FALL <= mid
    }
}

/// Smallest eigenvalue of the correlation matrix of `x` (NaN if `x` has a
/// non-positive diagonal entry).
pub fn min_correlation_eigenvalue(x: &Mat) -> f64 {
    let p = x.nrows();
    let d: Vec<f64> = (0..p).map(|a| x[(a, a)]).collect();
    if d.iter().any(|&v| !(v > 0.0)) {
        return f64::NAN;
    }
    let r = Mat::from_fn(p, p, |a, b| x[(a, b)] / (d[a] * d[b]).sqrt());
    crate::spd::kernels::sym_eigenvalues(&crate::spd::symmetrize(&r))
        .first()
        .copied()
        .unwrap_or(f64::NAN)
}

/// What the solver returns.
#[derive(Debug, Clone)]
pub struct Solution {
    /// The final iterate `X`.
    pub x: Mat,
    /// Final cost.
    pub cost: f64,
    /// Final whitened gradient norm.
    pub gradient_norm: f64,
    /// Accepted iterations.
    pub iterations: usize,
    /// Cost evaluations.
    pub evaluations: usize,
    /// Why it stopped.
    pub reason: StopReason,
    /// Per-iteration trace.
    pub trace: Vec<IterRecord>,
}

impl Solution {
    /// True when the stopping rule on the gradient was met.
    pub fn converged(&self) -> bool {
        self.reason == StopReason::Tolerance
    }
}

/// Sum over `n` items in fixed-size chunks, run in parallel, combined in a
/// fixed order: the result is bit-identical whatever the thread count.
pub fn chunked<T: Send>(
    n: usize,
    chunk: usize,
    f: impl Fn(std::ops::Range<usize>) -> T + Sync + Send,
) -> Vec<T> {
    use rayon::prelude::*;
    let chunks = n.div_ceil(chunk.max(1));
    (0..chunks)
        .into_par_iter()
        .map(|c| f(c * chunk..((c + 1) * chunk).min(n)))
        .collect()
}

/// Frobenius inner product of two equally sized matrices.
pub fn frob(a: &Mat, b: &Mat) -> f64 {
    a.iter().zip(b.iter()).map(|(x, y)| x * y).sum()
}

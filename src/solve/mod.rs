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

/// One line of the convergence trace.
#[derive(Debug, Clone, serde::Serialize)]
pub struct IterRecord {
    /// Iteration number (0 = the starting point).
    pub iteration: usize,
    /// Cost at this iterate.
    pub cost: f64,
    /// Whitened Riemannian gradient norm at this iterate.
    pub gradient_norm: f64,
    /// Step length accepted to reach this iterate (0 for the start).
    pub step: f64,
    /// Cost evaluations spent so far.
    pub evaluations: usize,
}

/// Why the solver stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum StopReason {
    /// The gradient norm met the tolerance.
    Tolerance,
    /// The iteration cap was reached first.
    MaxIterations,
    /// No step along a descent direction decreased the cost: the iterate sits
    /// at the floor set by rounding; the gradient norm tells how close.
    LineSearchStalled,
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

//! Riemannian L-BFGS with an Armijo backtracking line search.
//!
//! Algorithm: the two-loop recursion of Nocedal & Wright (2006, *Numerical
//! Optimization*, Alg. 7.4) run on whitened tangent vectors, where the
//! affine-invariant metric is Euclidean and parallel transport is the
//! identity (see the module above). Riemannian L-BFGS with this structure is
//! analysed by Huang, Gallivan & Absil (2015, "A Broyden class of quasi-Newton
//! methods for Riemannian optimization", SIAM J. Optim.). Safeguards that make
//! every step a descent step even on non-convex costs:
//! - a pair `(s, y)` enters the memory only if `⟨s, y⟩ > 1e-10 ‖s‖ ‖y‖`
//!   (the cautious update of Li & Fukushima 2001);
//! - a direction that is not a descent direction resets the memory;
//! - the Armijo condition `F(t) ≤ F(0) + 1e-4 t ⟨g, d⟩` accepts a step;
//! - near the optimum, where cost differences fall below rounding (about
//!   `ε·F`, reached once `‖g‖² ≈ ε F`), a step is also accepted if the cost
//!   stays within `1e-12·|F|` and the slope along `d` shrinks in magnitude,
//!   `|⟨g(t), d⟩| ≤ 0.9 |⟨g(0), d⟩|` — the "approximate Wolfe" idea of Hager &
//!   Zhang (2005, SIAM J. Optim.), which lets the gradient norm go down to its
//!   own rounding floor instead of the cost's.
//!
//! Two additions for costs that are not strictly convex:
//! - **flat directions**: when the problem offers a canonical representative
//!   ([`SpdProblem::canonical`], e.g. the maximum-determinant completion of
//!   entries no trial pins), every accepted iterate is moved there. The
//!   Euclidean gradient is unchanged by the move, so the whitened gradient is
//!   carried over as `Sᵀ g S`, `S = W⁻¹ W'`, and the memory pairs are
//!   carried as the same ambient tangent vectors, `T s Tᵀ`, `T = W'⁻¹ W`;
//! - **runs to the boundary**: the smallest eigenvalue of each iterate's
//!   correlation matrix is tracked; the criterion of [`super::boundary`]
//!   turns such a run into [`StopReason::Boundary`] instead of a convergence.

use std::collections::VecDeque;

use super::{
    Evaluation, IterRecord, Preconditioner, Solution, SpdProblem, StopReason, StopRule, boundary,
    frob, min_correlation_eigenvalue,
};
use crate::spd::kernels::sym_eigen;
use crate::spd::{Mat, symmetrize};

pub(super) const MEMORY: usize = 8;
pub(super) const ARMIJO_C1: f64 = 1e-4;
pub(super) const MAX_BACKTRACKS: usize = 40;
/// Longest preconditioned step, in whitened (affine-invariant) units.
const MAX_STEP: f64 = 1.0;
/// Relative band within which cost differences are treated as rounding.
pub(super) const ROUNDING_BAND: f64 = 1e-12;
/// Curvature factor of the approximate Wolfe test used inside that band.
pub(super) const CURVATURE_C2: f64 = 0.9;

/// Observer called after every accepted iterate (progress display).
pub type Observer<'a> = &'a (dyn Fn(&IterRecord) + Sync);

/// Minimises `problem` from `x0` (SPD). Returns `None` only when `x0` itself
/// is not a valid point of the problem.
pub fn minimize(
    problem: &dyn SpdProblem,
    x0: &Mat,
    rule: &StopRule,
    observer: Option<Observer<'_>>,
) -> Option<Solution> {
    // Start from the symmetric square root: W = X^{1/2}.
    let e0 = sym_eigen(&symmetrize(x0));
    if e0.values.first().is_none_or(|&v| v <= 0.0) {
        return None;
    }
    let mut w = e0.apply(f64::sqrt);
    if let Some(x) = problem.canonical(&symmetrize(x0)) {
        w = sym_eigen(&symmetrize(&x)).apply(|v| v.max(0.0).sqrt());
    }
    let mut eval = problem.evaluate(&w)?;
    let mut precond = problem.preconditioner(&w);
    let mut evaluations = 1;
    let mut memory: VecDeque<(Mat, Mat, f64)> = VecDeque::with_capacity(MEMORY);
    let mut trace: Vec<IterRecord> = Vec::new();
    let mut step = 0.0;
    let mut iteration = 0;
    // Lowest gradient norm so far and where (for the stall rule).
    let mut lowest = (f64::INFINITY, 0);
    // The last iterate that was safely inside the cone, to fall back to.
    let mut previous: Option<(Mat, Evaluation)> = None;
    let reason = loop {
        let gnorm = frob(&eval.grad, &eval.grad).sqrt();
        let r = min_correlation_eigenvalue(&(&w * w.transpose()));
        if iteration > 0 && !(r > boundary::HARD_FLOOR) {
            // Numerically singular: return the previous iterate.
            if let Some((w_prev, e_prev)) = previous.take() {
                w = w_prev;
                eval = e_prev;
                iteration -= 1;
            }
            break StopReason::Boundary;
        }
        let rec = IterRecord {
            iteration,
            cost: eval.cost,
            gradient_norm: gnorm,
            step,
            evaluations,
            min_correlation_eigenvalue: r,
        };
        if let Some(obs) = observer {
            obs(&rec);
        }
        trace.push(rec);
        if gnorm <= rule.tol {
            break StopReason::Tolerance;
        }
        if gnorm < lowest.0 {
            lowest = (gnorm, iteration);
        }
        if precond.is_some() && r < boundary::SUSPECT && iteration - lowest.1 >= boundary::STALL {
            break StopReason::Boundary;
        }
        if iteration >= rule.max_iter {
            break StopReason::MaxIterations;
        }
        let mut direction = two_loop(&eval, &memory, precond.as_ref());
        let mut slope = frob(&eval.grad, &direction);
        if !(slope < 0.0) {
            memory.clear();
            direction = two_loop(&eval, &memory, precond.as_ref());
            slope = frob(&eval.grad, &direction);
        }
        // A preconditioned step may not move any eigenvalue of the whitened
        // iterate by more than a factor e^MAX_STEP: long steps along weakly
        // pinned directions could otherwise leap into another basin.
        if precond.is_some() {
            let norm = frob(&direction, &direction).sqrt();
            if norm > MAX_STEP {
                direction *= MAX_STEP / norm;
                slope *= MAX_STEP / norm;
            }
        }
        // Backtracking along the geodesic X(t) = W exp(t d) Wᵀ.
        let dir_eig = sym_eigen(&direction);
        let allowance = 8.0 * f64::EPSILON * eval.cost.abs();
        let mut t = 1.0;
        let mut accepted = None;
        for _ in 0..MAX_BACKTRACKS {
            let half = dir_eig.apply(|v| (0.5 * t * v).exp());
            let w_new = &w * &half;
            evaluations += 1;
            // With a preconditioner, a trial point at the numerical boundary
            // of the cone is a step too long, not an iterate: long steps
            // along a weakly pinned direction must not end the run as a
            // boundary. (Plain runs keep their boundary detection as it was.)
            let inside = precond.is_none()
                || min_correlation_eigenvalue(&(&w_new * w_new.transpose())) > boundary::HARD_FLOOR;
            if let Some(e) = problem.evaluate(&w_new).filter(|_| inside) {
                // Slope at t: the transported direction is `d` itself.
                let slope_t = frob(&e.grad, &direction);
                let armijo = e.cost <= eval.cost + ARMIJO_C1 * t * slope + allowance;
                let near_flat = e.cost <= eval.cost + ROUNDING_BAND * eval.cost.abs()
                    && slope_t.abs() <= CURVATURE_C2 * slope.abs();
                if armijo || near_flat {
                    accepted = Some((w_new, e));
                    break;
                }
            }
            t *= 0.5;
        }
        let Some((w_new, e_new)) = accepted else {
            break StopReason::LineSearchStalled;
        };
        let s = &direction * t;
        let y = &e_new.grad - &eval.grad;
        let sy = frob(&s, &y);
        let (sn, yn) = (frob(&s, &s).sqrt(), frob(&y, &y).sqrt());
        if sy > 1e-10 * sn * yn {
            if memory.len() == MEMORY {
                memory.pop_front();
            }
            memory.push_back((s, y, 1.0 / sy));
        }
        previous = Some((w.clone(), eval.clone()));
        let (w_new, e_new) = match problem.canonical(&symmetrize(&(&w_new * w_new.transpose()))) {
            Some(x) => {
                let w_can = sym_eigen(&symmetrize(&x)).apply(|v| v.max(0.0).sqrt());
                carry_over(&w_new, w_can, e_new, &mut memory)
            }
            None => (w_new, e_new),
        };
        w = w_new;
        eval = e_new;
        precond = problem.preconditioner(&w);
        step = t;
        iteration += 1;
    };
    let x = symmetrize(&(&w * w.transpose()));
    let ratios: Vec<f64> = trace.iter().map(|r| r.min_correlation_eigenvalue).collect();
    let reason = if reason != StopReason::Boundary && boundary::trend(&ratios) {
        StopReason::Boundary
    } else {
        reason
    };
    Some(Solution {
        x,
        cost: eval.cost,
        gradient_norm: frob(&eval.grad, &eval.grad).sqrt(),
        iterations: iteration,
        evaluations,
        reason,
        trace,
    })
}

/// Moves the iterate from factor `w` to the canonical factor `w_can` (same
/// cost, same Euclidean gradient `∇F`): the whitened gradient `Wᵀ ∇F W`
/// becomes `Sᵀ g S` with `S = W⁻¹ W'`, and each memory vector, read as an
/// ambient tangent vector `W s Wᵀ`, is re-whitened at `W'`. Pairs that lose
/// positive curvature in the move are dropped (the cautious rule).
fn carry_over(
    w: &Mat,
    w_can: Mat,
    mut e: Evaluation,
    memory: &mut VecDeque<(Mat, Mat, f64)>,
) -> (Mat, Evaluation) {
    let Some(w_inv) = w.clone().try_inverse() else {
        return (w.clone(), e);
    };
    let Some(wc_inv) = w_can.clone().try_inverse() else {
        return (w.clone(), e);
    };
    let s_map = &w_inv * &w_can;
    e.grad = symmetrize(&(s_map.transpose() * &e.grad * &s_map));
    let t_map = &wc_inv * w;
    let old: Vec<(Mat, Mat, f64)> = memory.drain(..).collect();
    for (s, y, _) in old {
        let s2 = symmetrize(&(&t_map * s * t_map.transpose()));
        let y2 = symmetrize(&(&t_map * y * t_map.transpose()));
        let sy = frob(&s2, &y2);
        let (sn, yn) = (frob(&s2, &s2).sqrt(), frob(&y2, &y2).sqrt());
        if sy > 1e-10 * sn * yn {
            memory.push_back((s2, y2, 1.0 / sy));
        }
    }
    (w_can, e)
}

/// L-BFGS two-loop recursion: returns `-H g`. The initial inverse Hessian
/// is `γ I` without a preconditioner (`γ` = ⟨s, y⟩ / ⟨y, y⟩ from the newest
/// pair) and the preconditioner fitted band by band to the newest pair
/// with one; while the memory is empty, the problem's step hint (or 1)
/// times `P` (or `I`).
fn two_loop(
    eval: &Evaluation,
    memory: &VecDeque<(Mat, Mat, f64)>,
    precond: Option<&Preconditioner>,
) -> Mat {
    let mut q = -eval.grad.clone();
    let mut alphas = Vec::with_capacity(memory.len());
    for (s, y, rho) in memory.iter().rev() {
        let a = rho * frob(s, &q);
        q -= y * a;
        alphas.push(a);
    }
    // With a preconditioner the newest pair rescales it band by band
    // (`Preconditioner::fitted_to`), which replaces the single factor γ.
    let fitted = match (precond, memory.back()) {
        (Some(p), Some((s, y, _))) => Some(p.fitted_to(s, y)),
        _ => None,
    };
    let precond = fitted.as_ref().or(precond);
    let apply = |m: &Mat| match precond {
        Some(p) => p.apply(m),
        None => m.clone(),
    };
    let gamma = match memory.back() {
        Some(_) if fitted.is_some() => 1.0,
        Some((s, y, _)) => frob(s, y) / frob(y, &apply(y)),
        None => eval.step_hint.unwrap_or(1.0),
    };
    q = apply(&q) * gamma;
    for ((s, y, rho), a) in memory.iter().zip(alphas.iter().rev()) {
        let b = rho * frob(y, &q);
        q += s * (a - b);
    }
    symmetrize(&q)
}

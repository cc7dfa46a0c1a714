//! Minimising over the rows of a few channels while the block of all other
//! channels stays fixed.
//!
//! Order the channels as `C` (held) then `R` (free) and take a factor of the
//! iterate that is block lower triangular in that order,
//! `W̄ = [[W_A, 0], [β̃ᵀ, T]]`, so `X[C,C] = W_A W_Aᵀ = A`,
//! `X[C,R] = W_A β̃` and `X[R,R] = β̃ᵀβ̃ + T Tᵀ`. The solver's matrices keep
//! rows in channel order and columns in `(C, R)` order (`W = Πᵀ W̄`); the
//! problem only ever sees `X = W Wᵀ`.
//!
//! With such a factor the whitened tangent vector of a move `dX` is
//! `Ξ = W̄⁻¹ dX W̄⁻ᵀ`, and because `W̄⁻¹` is block lower triangular its `C,C`
//! block is `W_A⁻¹ dX[C,C] W_A⁻ᵀ`: moves that keep `A` are exactly the
//! whitened vectors with a zero `C,C` block, and the gradient along them is
//! the whitened gradient with that block zeroed (an orthogonal projection,
//! since the metric is Frobenius in whitened coordinates). A direction
//! `d = [[0, U], [Uᵀ, V]]` is followed by the retraction
//! `W̄(t) = W̄ [[I, 0], [t Uᵀ, exp(t V / 2)]]`, which keeps `W_A` — hence `A`
//! — exactly and has derivative `d` at `t = 0`. The solver is L-BFGS with
//! the identity as vector transport in whitened coordinates and an Armijo
//! backtracking line search (Nocedal & Wright 2006, Alg. 7.4), as in
//! [`super::lbfgs`].

use std::collections::VecDeque;

// Same memory, line search and rounding rules as the joint solver.
use super::lbfgs::{ARMIJO_C1, CURVATURE_C2, MAX_BACKTRACKS, MEMORY, ROUNDING_BAND};
use super::{Evaluation, SpdProblem, frob};
use crate::spd::kernels::sym_eigen;
use crate::spd::{Mat, symmetrize};

/// Where the fibre solver stopped.
#[derive(Debug, Clone)]
pub struct FibreSolution {
    /// Final factor (rows in channel order, columns `C` then `R`).
    pub w: Mat,
    /// The problem's evaluation there, gradient *not* projected.
    pub eval: Evaluation,
    /// Norm of the projected (free-rows) whitened gradient.
    pub gradient_norm: f64,
    /// Accepted iterations.
    pub iterations: usize,
    /// Whether `gradient_norm` met the tolerance.
    pub converged: bool,
}

/// The whitened gradient with its `C,C` block (the first `n_held` rows and
/// columns) zeroed: the gradient along moves that keep `A`.
fn project(g: &Mat, n_held: usize) -> Mat {
    let mut d = g.clone();
    d.view_mut((0, 0), (n_held, n_held)).fill(0.0);
    d
}

/// `W E(t d)` with `E = [[I, 0], [t Uᵀ, exp(t V / 2)]]` in column order.
fn retract(w: &Mat, d: &Mat, n_held: usize, t: f64) -> Mat {
    let p = d.nrows();
    let nr = p - n_held;
    let mut e = Mat::identity(p, p);
    let v = d.view((n_held, n_held), (nr, nr)).into_owned();
    let half = sym_eigen(&symmetrize(&v)).apply(|x| (0.5 * t * x).exp());
    e.view_mut((n_held, n_held), (nr, nr)).copy_from(&half);
    let u_t = d.view((n_held, 0), (nr, n_held)).into_owned() * t;
    e.view_mut((n_held, 0), (nr, n_held)).copy_from(&u_t);
    w * e
}

/// The curve's velocity at `t` in the whitened coordinates of the point it
/// reached: `E⁻¹E' + (E⁻¹E')ᵀ = [[0, U e^{−tV/2}], [e^{−tV/2} Uᵀ, V]]`.
fn velocity(d: &Mat, n_held: usize, t: f64) -> Mat {
    let p = d.nrows();
    let nr = p - n_held;
    let v = d.view((n_held, n_held), (nr, nr)).into_owned();
    let back = sym_eigen(&symmetrize(&v)).apply(|x| (-0.5 * t * x).exp());
    let lower = &back * d.view((n_held, 0), (nr, n_held));
    let mut out = d.clone();
    out.view_mut((n_held, 0), (nr, n_held)).copy_from(&lower);
    out.view_mut((0, n_held), (n_held, nr))
        .copy_from(&lower.transpose());
    out
}

/// Minimises `problem` over the free rows from the factor `w0` (see the
/// module notes; the first `n_held` columns of `w0` are the held block's),
/// until the projected gradient norm is at most `tol` or `max_iter`
/// iterations. `None` when the cost is undefined at `w0` (or `w0` is not
/// square with at least `n_held` columns).
pub fn minimize(
    problem: &dyn SpdProblem,
    w0: &Mat,
    n_held: usize,
    tol: f64,
    max_iter: usize,
) -> Option<FibreSolution> {
    if n_held > w0.ncols() || w0.nrows() != w0.ncols() {
        return None;
    }
    let mut w = w0.clone();
    let mut eval = problem.evaluate(&w)?;
    let mut g = project(&eval.grad, n_held);
    let mut memory: VecDeque<(Mat, Mat, f64)> = VecDeque::with_capacity(MEMORY);
    let mut iterations = 0;
    loop {
        let gnorm = frob(&g, &g).sqrt();
        if gnorm <= tol || iterations >= max_iter {
            return Some(FibreSolution {
                w,
                eval,
                gradient_norm: gnorm,
                iterations,
                converged: gnorm <= tol,
            });
        }
        let mut d = two_loop(&g, &memory, eval.step_hint);
        let mut slope = frob(&g, &d);
        if !(slope < 0.0) {
            memory.clear();
            d = two_loop(&g, &memory, eval.step_hint);
            slope = frob(&g, &d);
        }
        // Armijo, or — once cost differences are below rounding, as they
        // are near the inner minimum — a cost within the rounding band and
        // a slope shrinking along the curve (approximate Wolfe; Hager &
        // Zhang 2005), as in `lbfgs`.
        let mut t = 1.0;
        let mut accepted = None;
        for _ in 0..MAX_BACKTRACKS {
            let w_new = retract(&w, &d, n_held, t);
            if let Some(e) = problem.evaluate(&w_new) {
                let armijo = e.cost <= eval.cost + ARMIJO_C1 * t * slope;
                let near_flat = e.cost <= eval.cost + ROUNDING_BAND * eval.cost.abs()
                    && frob(&e.grad, &velocity(&d, n_held, t)).abs() <= CURVATURE_C2 * slope.abs();
                if armijo || near_flat {
                    accepted = Some((w_new, e));
                    break;
                }
            }
            t *= 0.5;
        }
        let Some((w_new, e_new)) = accepted else {
            // At the rounding floor: no step lowers the cost.
            return Some(FibreSolution {
                w,
                eval,
                gradient_norm: gnorm,
                iterations,
                converged: false,
            });
        };
        let g_new = project(&e_new.grad, n_held);
        let s = &d * t;
        let y = &g_new - &g;
        let sy = frob(&s, &y);
        if sy > 1e-10 * frob(&s, &s).sqrt() * frob(&y, &y).sqrt() {
            if memory.len() == MEMORY {
                memory.pop_front();
            }
            memory.push_back((s, y, 1.0 / sy));
        }
        w = w_new;
        eval = e_new;
        g = g_new;
        iterations += 1;
    }
}

/// Two-loop recursion: `-H g`, initial matrix `γ I` (`γ` from the newest
/// pair, or the problem's step hint while the memory is empty). Every
/// vector involved has a zero held block, so the direction has one too.
fn two_loop(g: &Mat, memory: &VecDeque<(Mat, Mat, f64)>, hint: Option<f64>) -> Mat {
    let mut q = -g.clone();
    let mut alphas = Vec::with_capacity(memory.len());
    for (s, y, rho) in memory.iter().rev() {
        let a = rho * frob(s, &q);
        q -= y * a;
        alphas.push(a);
    }
    let gamma = match memory.back() {
        Some((s, y, _)) => frob(s, y) / frob(y, y),
        None => hint.unwrap_or(1.0),
    };
    q *= gamma;
    for ((s, y, rho), a) in memory.iter().zip(alphas.iter().rev()) {
        let b = rho * frob(y, &q);
        q += s * (a - b);
    }
    symmetrize(&q)
}

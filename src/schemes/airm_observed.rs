//! The masked Riemannian mean: a full-size mean from observed sub-blocks only.
//!
//! Trial `i` observed channels `o_i` and gives `C_i = C_i[o_i,o_i]`. We minimise
//! `F(X) = ½ Σ ŵ_i δ²(X[o_i,o_i], C_i)` over full-size SPD `X`. Unobserved
//! entries never enter: no filling, no loading. The derivation of the gradient
//! is in docs/masked-mean.md; in short, with `X[o,o] = L Lᵀ` (Cholesky) and
//! `M_i = L⁻¹ C_i L⁻ᵀ`, the Euclidean gradient is
//! `∇F = −Σ ŵ_i E_o(L⁻ᵀ log(M_i) L⁻¹)`, `E_o` embedding a `k×k` block at
//! rows/columns `o`, and the whitened Riemannian gradient is `Wᵀ ∇F W`.
//!
//! Trials that share a pattern share `L`, so the factorisation and the back
//! transformation are done once per pattern; only whitening and the
//! eigendecomposition are per trial.
//!
//! The cost is not geodesically convex in general (see docs), so a
//! multi-start check is offered. Pairs of channels never observed together are
//! not pinned by the cost; after solving they are filled by the
//! maximum-determinant completion ([`crate::diagnose::completion`]).

use super::rare_rows::{self, RareSplit};
use super::{
    AveragingScheme, Diagnostics, MeanResult, SchemeOptions, StartOutcome, VanishingDirection,
};
use crate::diagnose::{identifiability, max_det_completion};
use crate::error::{LacunaError, Result};
use crate::simulate::rng::Rng;
use crate::solve::{
    Evaluation, IterRecord, Preconditioner, Solution, SpdProblem, StopReason, chunked, lbfgs,
};
use crate::spd::kernels::{
    add_congruence_t, add_rebuild, cholesky, solve_lower_in_place, sym_eigen, whiten,
};
use crate::spd::{Mat, airm_distance, expm_sym, symmetrize};
use crate::trials::{PatternGroup, TrialSet};

/// The masked Riemannian mean (`airm-observed`).
pub struct AirmObserved;

/// How the masked solver picks its starting point.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum InitRule {
    /// Pairwise (available-case) weighted average of observed entries, zero
    /// for pairs never co-observed, eigenvalues floored to make it SPD.
    AvailableCase,
    /// Diagonal of per-channel weighted geometric means of observed variances.
    Diagonal,
    /// Identity scaled by the geometric mean of all observed variances.
    ScaledIdentity,
}

impl InitRule {
    /// Name used on the command line.
    pub fn name(self) -> &'static str {
        match self {
            InitRule::AvailableCase => "available-case",
            InitRule::Diagonal => "diagonal",
            InitRule::ScaledIdentity => "scaled-identity",
        }
    }

    /// Parses a command-line name.
    pub fn from_name(s: &str) -> Option<Self> {
        [
            InitRule::AvailableCase,
            InitRule::Diagonal,
            InitRule::ScaledIdentity,
        ]
        .into_iter()
        .find(|r| r.name() == s)
    }

    /// Builds the starting point for `set`.
    pub fn start(self, set: &TrialSet) -> Mat {
        let p = set.n_channels();
        let w = set.normalized_weights();
        // Weighted geometric mean of each channel's observed variances.
        let mut log_var = vec![0.0; p];
        let mut wsum = vec![0.0; p];
        for (t, &wi) in set.trials().iter().zip(&w) {
            for (a, &c) in t.observed.iter().enumerate() {
                log_var[c] += wi * t.block[(a, a)].ln();
                wsum[c] += wi;
            }
        }
        let var: Vec<f64> = (0..p)
            .map(|c| {
                if wsum[c] > 0.0 {
                    (log_var[c] / wsum[c]).exp()
                } else {
                    1.0
                }
            })
            .collect();
        match self {
            InitRule::Diagonal => Mat::from_diagonal(&nalgebra::DVector::from_vec(var)),
            InitRule::ScaledIdentity => {
                let g = (var.iter().map(|v| v.ln()).sum::<f64>() / p as f64).exp();
                Mat::identity(p, p) * g
            }
            InitRule::AvailableCase => {
                let avg = super::alternatives::pairwise_mean(set);
                // Pairwise averages need not be PD; floor the spectrum at
                // 1e-3 of the mean variance (common practice, no source).
                let floor = 1e-3 * avg.trace() / p as f64;
                sym_eigen(&symmetrize(&avg)).apply(|v| v.max(floor))
            }
        }
    }
}

/// The Bini–Iannazzo term `((c+1)/(c−1)) ln c`, with its limit 2 at `c = 1`.
fn step_term(c: f64) -> f64 {
    if c < 1.0 + 1e-8 {
        2.0
    } else {
        (c + 1.0) / (c - 1.0) * c.ln()
    }
}

/// Per-chunk partial sums: weighted whitened logs, cost, step-hint denominator.
/// One evaluation task's sums: cost, step hint, the gradient of the groups
/// it holds whole, and the k×k partials of groups split with other tasks.
struct TaskSum {
    cost: f64,
    hint: f64,
    ok: bool,
    grad: Option<Mat>,
    split: Vec<(usize, Mat)>,
}

/// The masked cost over a trial set (with complete trials, the Karcher cost).
pub struct MaskedKarcherProblem<'a> {
    set: &'a TrialSet,
    groups: Vec<PatternGroup>,
    weights: Vec<f64>,
    /// Work items: (group index, range into that group's trial list).
    items: Vec<(usize, std::ops::Range<usize>)>,
    /// Pairs no trial observes together: flat directions of the cost.
    free_pairs: Vec<[usize; 2]>,
    /// Channels from the least to the most observed (weighted), when
    /// coverage is unequal; None with equal coverage (no preconditioner).
    coverage_order: Option<Vec<usize>>,
}

/// Trials per work item. Small, because items of one large group (the
/// complete trials) next to many one-trial groups balanced badly over two
/// threads at 32 (1.3× speedup measured; 1.9× at 4). Fixed, so results do
/// not depend on the thread count.
const CHUNK: usize = 4;

/// Work items per parallel task in an evaluation (fixed, so results do not
/// depend on the thread count).
const ITEMS_PER_TASK: usize = 8;

/// Tasks run at once before their sums are folded in (bounds the p×p
/// accumulators alive at one time; fixed, so results do not depend on the
/// thread count).
const TASKS_PER_ROUND: usize = 64;

impl<'a> MaskedKarcherProblem<'a> {
    /// Prepares the problem (groups trials by observation pattern).
    pub fn new(set: &'a TrialSet) -> Self {
        let groups = set.pattern_groups();
        let mut items = Vec::new();
        for (g, grp) in groups.iter().enumerate() {
            let n = grp.trials.len();
            for start in (0..n).step_by(CHUNK) {
                items.push((g, start..(start + CHUNK).min(n)));
            }
        }
        let weights = set.normalized_weights();
        MaskedKarcherProblem {
            set,
            coverage_order: coverage_order(set, &weights),
            groups,
            weights,
            items,
            free_pairs: identifiability(set).unconstrained_pairs,
        }
    }

    /// The problem on one part (shard) of a larger trial set whose raw
    /// weights total `total`: each trial weighs `w_i / total`, so the parts'
    /// costs and gradients add up to the whole set's.
    pub fn with_weight_total(set: &'a TrialSet, total: f64) -> Self {
        let mut problem = Self::new(set);
        problem.weights = set.weights().iter().map(|w| w / total).collect();
        problem
    }

    /// The same problem without the preconditioner: the solver then runs
    /// plain L-BFGS (checks and benchmarks).
    pub fn without_preconditioner(mut self) -> Self {
        self.coverage_order = None;
        self
    }

    /// The cost of the trials `keep` alone (weights still those of the
    /// whole set, so the parts add up to the whole), with no flat
    /// directions and no preconditioner: the caller (`rare_rows`) holds
    /// the other entries, so a pair this part never observes is not free.
    /// Shares the set's blocks instead of copying them.
    pub(crate) fn part(set: &'a TrialSet, keep: &[usize]) -> Self {
        let mut problem = Self::new(set).without_preconditioner();
        problem.free_pairs.clear();
        let mut wanted = vec![false; set.len()];
        for &i in keep {
            wanted[i] = true;
        }
        problem.groups.retain_mut(|g| {
            g.trials.retain(|&i| wanted[i]);
            !g.trials.is_empty()
        });
        problem.items.clear();
        for (g, grp) in problem.groups.iter().enumerate() {
            let n = grp.trials.len();
            for start in (0..n).step_by(CHUNK) {
                problem.items.push((g, start..(start + CHUNK).min(n)));
            }
        }
        problem
    }

    /// Whether the solver gets a preconditioner on this set.
    pub fn is_preconditioned(&self) -> bool {
        self.coverage_order.is_some()
    }

    /// The cost `F(X)` alone (used by tests and diagnostics).
    pub fn cost(&self, x: &Mat) -> Option<f64> {
        self.evaluate(&sym_eigen(&symmetrize(x)).apply(f64::sqrt))
            .map(|e| e.cost)
    }

    /// The Euclidean gradient `∇F(X)` (symmetric `p×p`), for checks.
    pub fn euclidean_gradient(&self, x: &Mat) -> Option<Mat> {
        let e = sym_eigen(&symmetrize(x));
        let w = e.apply(f64::sqrt);
        let wi = e.apply(|v| 1.0 / v.sqrt());
        let ev = self.evaluate(&w)?;
        Some(&wi.transpose() * ev.grad * &wi)
    }
}

impl SpdProblem for MaskedKarcherProblem<'_> {
    fn size(&self) -> usize {
        self.set.n_channels()
    }

    /// Free entries go to the maximum-determinant completion: the cost and
    /// its Euclidean gradient involve only co-observed entries, so both are
    /// unchanged, and the iterate stays as far inside the cone as its pinned
    /// entries allow (docs/masked-mean.md, "Flat directions").
    fn canonical(&self, x: &Mat) -> Option<Mat> {
        if self.free_pairs.is_empty() {
            return None;
        }
        Some(max_det_completion(x, &self.free_pairs).matrix)
    }

    /// The inverse of the diagonal of the cost's Hessian model in an
    /// orthonormal basis built from the channels' dual directions W⁻¹ e_a,
    /// least observed first (docs/masked-mean.md, "Preconditioning").
    fn preconditioner(&self, w: &Mat) -> Option<Preconditioner> {
        let order = self.coverage_order.as_ref()?;
        let basis = dual_basis(w, order)?;
        let p = self.size();
        let x = symmetrize(&(w * w.transpose()));
        // Summed over patterns in fixed chunks, in order (thread-count independent).
        let parts = chunked(self.groups.len(), 16, |r| {
            let mut acc = Mat::zeros(p, p);
            for grp in &self.groups[r] {
                let wg: f64 = grp.trials.iter().map(|&i| self.weights[i]).sum();
                if wg == 0.0 {
                    continue;
                }
                let Some(l) = cholesky(&crate::spd::sub_block(&x, &grp.observed)) else {
                    continue;
                };
                let mut q = Mat::from_fn(grp.observed.len(), p, |a, j| w[(grp.observed[a], j)]);
                solve_lower_in_place(&l, &mut q);
                let r = q * &basis;
                let m = r.transpose() * &r;
                for a in 0..p {
                    for b in 0..p {
                        let both = m[(a, a)] * m[(b, b)] + m[(a, b)] * m[(a, b)];
                        acc[(a, b)] += wg * if a == b { 0.5 * both } else { both };
                    }
                }
            }
            acc
        });
        let mut h = Mat::zeros(p, p);
        for part in parts {
            h += part;
        }
        let top = h.iter().copied().fold(0.0f64, f64::max);
        let scale = h.map(|v| 1.0 / v.max(1e-12 * top));
        Some(Preconditioner { basis, scale })
    }

    fn evaluate(&self, w: &Mat) -> Option<Evaluation> {
        use rayon::prelude::*;
        let x = symmetrize(&(w * w.transpose()));
        let trials = self.set.trials();
        // One Cholesky factor per observation pattern.
        let factors: Vec<Option<Mat>> = self
            .groups
            .par_iter()
            .map(|g| {
                let k = g.observed.len();
                cholesky(&Mat::from_fn(k, k, |a, b| {
                    x[(g.observed[a], g.observed[b])]
                }))
            })
            .collect();
        if factors.iter().any(Option::is_none) {
            return None;
        }
        let p = self.size();
        // Q_g = L_g⁻¹ W[o_g,:]: the group's rows of the whitened gradient map.
        let q_of = |g: usize| {
            let grp = &self.groups[g];
            let l = factors[g].as_ref().expect("checked above");
            let mut q = Mat::from_fn(grp.observed.len(), p, |a, j| w[(grp.observed[a], j)]);
            solve_lower_in_place(l, &mut q);
            q
        };
        // Each task sums its items per group (consecutive items of one group
        // share one partial). A group whose trials all fall in the task (the
        // usual case for the many small groups of incomplete trials) goes
        // straight into the task's p×p gradient; only groups split across
        // tasks keep a k×k partial for the reduction below. Tasks run in
        // rounds of fixed size and are summed in task order, so at most one
        // round's accumulators are alive (memory stays near the data's, not
        // twice it) and the result does not depend on the thread count.
        let n_tasks = self.items.len().div_ceil(ITEMS_PER_TASK);
        let task = |t: usize| -> TaskSum {
            let items =
                &self.items[t * ITEMS_PER_TASK..((t + 1) * ITEMS_PER_TASK).min(self.items.len())];
            let mut out = TaskSum {
                cost: 0.0,
                hint: 0.0,
                ok: true,
                grad: None,
                split: Vec::new(),
            };
            let mut open: Option<(usize, Mat, bool)> = None;
            let close = |out: &mut TaskSum, (g, logs, whole): (usize, Mat, bool)| {
                if whole {
                    let acc = out.grad.get_or_insert_with(|| Mat::zeros(p, p));
                    add_congruence_t(acc, &q_of(g), &logs, -1.0);
                } else {
                    out.split.push((g, logs));
                }
            };
            for (g, range) in items {
                let grp = &self.groups[*g];
                let l = factors[*g].as_ref().expect("checked above");
                let k = grp.observed.len();
                if open.as_ref().is_none_or(|(last, _, _)| last != g) {
                    if let Some(done) = open.take() {
                        close(&mut out, done);
                    }
                    open = Some((*g, Mat::zeros(k, k), range.start == 0));
                }
                let (_, logs, whole) = open.as_mut().expect("opened above");
                if range.end < grp.trials.len() {
                    *whole = false;
                }
                for &i in &grp.trials[range.clone()] {
                    let wi = self.weights[i];
                    if wi == 0.0 {
                        continue;
                    }
                    let e = sym_eigen(&whiten(l, &trials[i].block));
                    let (lo, hi) = (e.values[0], e.values[k - 1]);
                    if !(lo > 0.0) || !hi.is_finite() {
                        out.ok = false;
                        return out;
                    }
                    let lg: Vec<f64> = e.values.iter().map(|v| v.ln()).collect();
                    out.cost += 0.5 * wi * lg.iter().map(|v| v * v).sum::<f64>();
                    out.hint += wi * step_term(hi / lo);
                    let scaled: Vec<f64> = lg.iter().map(|v| wi * v).collect();
                    add_rebuild(logs, &e.vectors, &scaled);
                }
            }
            if let Some(done) = open.take() {
                close(&mut out, done);
            }
            out
        };
        let (mut cost, mut hint) = (0.0, 0.0);
        let mut grad = Mat::zeros(p, p);
        // Partials of split groups, reduced per group in task order.
        let mut split: std::collections::BTreeMap<usize, Mat> = std::collections::BTreeMap::new();
        for round in (0..n_tasks).step_by(TASKS_PER_ROUND) {
            let sums: Vec<TaskSum> = (round..(round + TASKS_PER_ROUND).min(n_tasks))
                .into_par_iter()
                .map(task)
                .collect();
            for t in sums {
                if !t.ok {
                    return None;
                }
                cost += t.cost;
                hint += t.hint;
                if let Some(g) = t.grad {
                    grad += g;
                }
                for (g, logs) in t.split {
                    match split.get_mut(&g) {
                        Some(s) => *s += logs,
                        None => {
                            split.insert(g, logs);
                        }
                    }
                }
            }
        }
        // Whitened gradient: Wᵀ ∇F W = −Σ_g Q_gᵀ B_g Q_g with Q_g = L_g⁻¹ W[o_g,:].
        // Q_g has orthonormal rows (Q_g Q_gᵀ = I), so this sum stays accurate
        // when X is ill-conditioned, unlike forming ∇F and multiplying by W.
        // Split groups are summed in fixed chunks of 16, in group order.
        let jobs: Vec<(usize, Mat)> = split.into_iter().collect();
        let parts = chunked(jobs.len(), 16, |r| {
            let mut acc = Mat::zeros(p, p);
            for (g, b) in &jobs[r] {
                add_congruence_t(&mut acc, &q_of(*g), b, -1.0);
            }
            acc
        });
        for part in parts {
            grad += part;
        }
        let grad = symmetrize(&grad);
        Some(Evaluation {
            cost,
            grad,
            step_hint: Some(2.0 / hint),
        })
    }
}

/// Coverage ratio (least over most observed pair) below which the masked
/// mean is preconditioned.
const COVERAGE_SPREAD: f64 = 0.5;

/// Weighted co-observation: entry (a, b) sums the weights of the trials
/// that observe channels a and b together.
pub(super) fn weighted_coverage(set: &TrialSet, weights: &[f64]) -> Mat {
    let p = set.n_channels();
    let mut n = Mat::zeros(p, p);
    for (t, &wi) in set.trials().iter().zip(weights) {
        for &a in &t.observed {
            for &b in &t.observed {
                n[(a, b)] += wi;
            }
        }
    }
    n
}

/// Channels ordered by their weighted share of trials, least first, or
/// None when some pair is never observed together, or when the pairs'
/// shares are within a factor of two of each other
/// (complete data, light dropout): the Hessian model is then close to a
/// multiple of the identity, which L-BFGS's own scaling already is, and the
/// preconditioner would only cost time (15 % at N = 5 000, p = 64).
fn coverage_order(set: &TrialSet, weights: &[f64]) -> Option<Vec<usize>> {
    let p = set.n_channels();
    let n = weighted_coverage(set, weights);
    let (lo, hi) = n
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(l, h), &v| (l.min(v), h.max(v)));
    // Pairs never observed together are flat directions, kept at the
    // maximum-determinant completion by `canonical`; a preconditioner would
    // blow up the rounding noise of the gradient along them.
    if !(lo > 0.0 && lo < COVERAGE_SPREAD * hi) {
        return None;
    }
    let mut order: Vec<usize> = (0..p).collect();
    order.sort_by(|&a, &b| n[(a, a)].total_cmp(&n[(b, b)]).then(a.cmp(&b)));
    Some(order)
}

/// An orthonormal basis from the dual directions `v_a = W⁻¹ e_a` by
/// Gram–Schmidt in `order` (least observed channel first, twice for
/// accuracy): the first column is exactly the whitened direction a trial
/// without the rarest channel cannot see. Columns are returned in channel
/// order.
fn dual_basis(w: &Mat, order: &[usize]) -> Option<Mat> {
    let w_inv = w.clone().try_inverse()?;
    let p = order.len();
    let mut basis = Mat::zeros(p, p);
    let mut done: Vec<usize> = Vec::with_capacity(p);
    for &a in order {
        let mut v = w_inv.column(a).into_owned();
        for _ in 0..2 {
            for &b in &done {
                let bb = basis.column(b).into_owned();
                let c = bb.dot(&v);
                v -= bb * c;
            }
        }
        let n = v.norm();
        if !(n > 0.0) || !n.is_finite() {
            return None;
        }
        basis.set_column(a, &(v / n));
        done.push(a);
    }
    Some(basis)
}

/// An elimination run that stopped within this factor of the tolerance is
/// finished by the joint solver from where it stopped (the last digits,
/// where the inner solves meet their rounding floor).
const POLISH_WITHIN: f64 = 1e3;

/// The masked mean by elimination of the rare rows (`rare_rows`), finished
/// by the joint solver when it stopped just short of the tolerance. The
/// solution and its note, or why it did not serve.
fn eliminate(
    set: &TrialSet,
    split: &RareSplit,
    joint: &MaskedKarcherProblem,
    x0: &Mat,
    options: &SchemeOptions,
    observer: Option<&(dyn Fn(&IterRecord) + Sync)>,
) -> std::result::Result<(Solution, String), String> {
    let run = rare_rows::minimize(set, split, x0, &options.stop, observer).ok_or(
        "gave up (the start did not suit it, or the rare rows found no minimiser for some common block)",
    )?;
    let names: Vec<&str> = split
        .rare
        .iter()
        .map(|&c| set.channels()[c].as_str())
        .collect();
    let mut note = format!(
        "rarely observed channel(s) {} (in {} of {} trials): their rows were fitted exactly for every step of the other channels' block ({} inner iterations over those trials, {} evaluations of the whole set); the iteration trace is that block's",
        names.join(", "),
        split.rare_trials.len(),
        set.len(),
        run.inner_iterations,
        run.solution.evaluations
    );
    let mut sol = run.solution;
    if sol.converged() {
        return Ok((sol, note));
    }
    let why = format!(
        "stopped ({:?}, gradient {:.1e})",
        sol.reason, sol.gradient_norm
    );
    if !(sol.gradient_norm <= POLISH_WITHIN * options.stop.tol) {
        return Err(why);
    }
    let finish = lbfgs::minimize(joint, &sol.x, &options.stop, None)
        .filter(Solution::converged)
        .ok_or(why)?;
    note.push_str(&format!(
        ", then {} iteration(s) of the joint solver took the gradient from {:.1e} to the tolerance",
        finish.iterations, sol.gradient_norm
    ));
    let (k, e) = (sol.iterations, sol.evaluations);
    sol.trace
        .extend(finish.trace.iter().skip(1).map(|r| IterRecord {
            iteration: r.iteration + k,
            evaluations: r.evaluations + e,
            ..r.clone()
        }));
    Ok((
        Solution {
            iterations: k + finish.iterations,
            evaluations: e + finish.evaluations,
            trace: sol.trace,
            ..finish
        },
        note,
    ))
}

/// A random congruence of `x`: `W exp(σ Z) Wᵀ`, `Z` symmetric Gaussian.
fn perturbed(x: &Mat, rng: &mut Rng, sigma: f64) -> Mat {
    let p = x.nrows();
    let mut z = Mat::zeros(p, p);
    for a in 0..p {
        for b in 0..=a {
            let v = rng.normal() * sigma;
            z[(a, b)] = v;
            z[(b, a)] = v;
        }
    }
    let w = sym_eigen(x).apply(f64::sqrt);
    symmetrize(&(&w * expm_sym(&z) * &w))
}

/// Pairs `[a, b]` (`a ≤ b`) that some trial observes together.
fn pinned_pairs(p: usize, free: &[[usize; 2]]) -> Vec<[usize; 2]> {
    let mut out = Vec::new();
    for a in 0..p {
        for b in a..p {
            if free.binary_search(&[a, b]).is_err() {
                out.push([a, b]);
            }
        }
    }
    out
}

/// Largest `|X_ab − Y_ab| / sqrt(X_aa X_bb)` over the given pairs.
fn pinned_difference(x: &Mat, y: &Mat, pairs: &[[usize; 2]]) -> f64 {
    pairs
        .iter()
        .map(|&[a, b]| (x[(a, b)] - y[(a, b)]).abs() / (x[(a, a)] * x[(b, b)]).sqrt())
        .fold(0.0, f64::max)
}

impl AirmObserved {
    fn starting_points(&self, set: &TrialSet, options: &SchemeOptions) -> Vec<(String, Mat)> {
        let mut starts = match &options.warm_start {
            Some(x) if x.nrows() == set.n_channels() => {
                vec![("given warm-start".to_string(), (**x).clone())]
            }
            _ => vec![(options.init.name().to_string(), options.init.start(set))],
        };
        for rule in [
            InitRule::AvailableCase,
            InitRule::Diagonal,
            InitRule::ScaledIdentity,
        ] {
            if starts.len() >= options.starts {
                break;
            }
            if rule != options.init {
                starts.push((rule.name().to_string(), rule.start(set)));
            }
        }
        let mut rng = Rng::new(options.seed);
        let sigma = 0.5 / (set.n_channels() as f64).sqrt();
        let base = starts[0].1.clone();
        while starts.len() < options.starts {
            let k = starts.len();
            starts.push((
                format!("random congruence #{k} of {}", options.init.name()),
                perturbed(&base, &mut rng, sigma),
            ));
        }
        starts
    }
}

impl AveragingScheme for AirmObserved {
    fn id(&self) -> super::SchemeId {
        super::SchemeId::AirmObserved
    }
    fn corrects_scale(&self) -> bool {
        true
    }
    fn summary(&self) -> &'static str {
        "full-size affine-invariant mean fitted to each trial's observed sub-block only"
    }
    fn handles_missing(&self) -> bool {
        true
    }
    fn compute(&self, set: &TrialSet, options: &SchemeOptions) -> Result<MeanResult> {
        let ident = identifiability(set);
        if let Some(&c) = ident.never_observed.first() {
            return Err(LacunaError::NeverObserved {
                channel: set.channels()[c].clone(),
                count: ident.never_observed.len(),
            });
        }
        let mut problem = MaskedKarcherProblem::new(set);
        if !options.precondition {
            problem = problem.without_preconditioner();
        }
        // Plain L-BFGS, built only when a preconditioned run must be checked.
        let mut plain: Option<MaskedKarcherProblem> = None;
        let mut fallbacks: Vec<String> = Vec::new();
        let obs = options.observer.clone();
        let mut runs: Vec<(String, Solution)> = Vec::new();
        // Rarely observed channels: their rows are eliminated exactly for
        // each step of the common block (docs/masked-mean.md).
        let split = if options.precondition && options.eliminate_rare {
            RareSplit::of(set)
        } else {
            None
        };
        let mut eliminated: Vec<Option<String>> = Vec::new();
        for (k, (label, x0)) in self.starting_points(set, options).into_iter().enumerate() {
            // Progress is shown for the first start only.
            let observer = if k == 0 {
                obs.as_deref().map(|f| f as &(dyn Fn(&IterRecord) + Sync))
            } else {
                None
            };
            if let Some(split) = &split {
                match eliminate(set, split, &problem, &x0, options, observer) {
                    Ok((sol, note)) => {
                        eliminated.push(Some(note));
                        runs.push((label, sol));
                        continue;
                    }
                    Err(why) => fallbacks.push(format!(
                        "start '{label}': eliminating the rare channels' rows {why}; the joint solver was used from the start"
                    )),
                }
            }
            let mut sol =
                lbfgs::minimize(&problem, &x0, &options.stop, observer).ok_or_else(|| {
                    LacunaError::Numerical(format!(
                        "starting point '{label}' makes an observed sub-block singular"
                    ))
                })?;
            // The preconditioner must never cost a result: a preconditioned
            // run that did not converge is repeated with plain L-BFGS, and
            // the plain run is kept when it converged or ended lower.
            if !sol.converged() && problem.is_preconditioned() {
                let plain = plain
                    .get_or_insert_with(|| MaskedKarcherProblem::new(set).without_preconditioner());
                if let Some(other) = lbfgs::minimize(plain, &x0, &options.stop, None)
                    && (other.converged() || other.cost < sol.cost)
                {
                    fallbacks.push(format!(
                        "start '{label}': the preconditioned solver stopped ({:?}, cost {:.6e}) and plain L-BFGS was used ({:?} after {} iterations, cost {:.6e})",
                        sol.reason, sol.cost, other.reason, other.iterations, other.cost
                    ));
                    sol = other;
                }
            }
            runs.push((label, sol));
            eliminated.push(None);
        }
        // Report the converged run with the lowest cost (any run if none
        // converged); a later start must beat the current best by more than
        // rounding (1e-10 relative) to replace it, so the chosen --init wins ties.
        let any_converged = runs.iter().any(|(_, s)| s.converged());
        let best = (0..runs.len())
            .filter(|&k| runs[k].1.converged() || !any_converged)
            .fold(None, |b: Option<usize>, k| match b {
                Some(b) if runs[k].1.cost >= runs[b].1.cost - 1e-10 * runs[b].1.cost.abs() => {
                    Some(b)
                }
                _ => Some(k),
            })
            .unwrap_or(0);
        let completed: Vec<Mat> = runs
            .iter()
            .map(|(_, s)| max_det_completion(&s.x, &ident.unconstrained_pairs).matrix)
            .collect();
        let sol = &runs[best].1;
        let mut diagnostics = Diagnostics::from_solution(sol, options.stop.tol);
        diagnostics
            .notes
            .push(format!("started from the {} rule", runs[best].0));
        diagnostics.notes.extend(fallbacks);
        diagnostics.notes.extend(eliminated[best].clone());
        diagnostics.unconstrained_pairs = ident.unconstrained_pairs.clone();
        diagnostics.completed_pairs = ident.unconstrained_pairs.len();
        if !ident.unconstrained_pairs.is_empty() {
            diagnostics.notes.push(format!(
                "{} channel pair(s) are never observed together; their covariances were kept at the maximum-determinant completion throughout the solve",
                ident.unconstrained_pairs.len()
            ));
        }
        if sol.reason == StopReason::Boundary {
            let v = VanishingDirection::of(&completed[best]);
            let names: Vec<String> = v
                .channels
                .iter()
                .map(|&(c, share)| format!("{} ({:.0}%)", set.channels()[c], 100.0 * share))
                .collect();
            diagnostics.notes.push(format!(
                "no positive definite mean exists: the observed blocks are mutually inconsistent, and the cost keeps decreasing as the mean becomes singular (smallest correlation eigenvalue {:.1e}) along a direction spanned by {}. The last safely positive definite iterate is written. What to do: use a regularising scheme (shrinkage, diagonal-loading, gaussian-em), leave out one of these channels, or add trials that observe them together",
                v.min_correlation_eigenvalue,
                names.join(", ")
            ));
            diagnostics.boundary = Some(v);
        }
        if runs.len() > 1 {
            let pinned = pinned_pairs(set.n_channels(), &ident.unconstrained_pairs);
            diagnostics.starts = runs
                .iter()
                .zip(&completed)
                .map(|((label, s), m)| {
                    let diff = pinned_difference(&completed[best], m, &pinned);
                    let verdict = match s.reason {
                        StopReason::Boundary => "ran to the boundary",
                        _ if !s.converged() => "did not converge",
                        _ if diff <= 1e-6 => "same mean",
                        _ => "different local minimum",
                    };
                    StartOutcome {
                        init: label.clone(),
                        cost: s.cost,
                        iterations: s.iterations,
                        converged: s.converged(),
                        distance_to_reported: airm_distance(&completed[best], m),
                        determined_difference: diff,
                        verdict: verdict.into(),
                    }
                })
                .collect();
            // Only converged starts can testify about local minima.
            let converged: Vec<&StartOutcome> =
                diagnostics.starts.iter().filter(|s| s.converged).collect();
            let agree = converged.iter().all(|s| s.verdict == "same mean");
            diagnostics.starts_agree = Some(agree);
            if !agree {
                let costs: Vec<String> = converged
                    .iter()
                    .filter(|s| s.verdict != "same mean")
                    .map(|s| format!("{} (cost {:.10e})", s.init, s.cost))
                    .collect();
                diagnostics.notes.push(format!("converged starts reached different means on the determined entries: the masked cost has more than one local minimum on these data. The lowest-cost mean (cost {:.10e}) is reported; other minima: {}", sol.cost, costs.join(", ")));
            }
            let stuck = diagnostics.starts.iter().filter(|s| !s.converged).count();
            if stuck > 0 {
                diagnostics.notes.push(format!(
                    "{stuck} start(s) did not converge; they are listed but not compared"
                ));
            }
        }
        Ok(MeanResult {
            scheme: self.name().into(),
            mean: completed[best].clone(),
            diagnostics,
        })
    }
}

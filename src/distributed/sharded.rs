//! The masked mean (`airm-observed`) with the trials spread over processes.
//!
//! Every quantity that sums over trials — weight total, co-observation
//! counts, the starting point, each evaluation of the cost — is summed per
//! shard, rounded once to fixed point and added as integers across shards
//! and processes ([`super::exact`]). Each step of a run makes the same
//! collective calls on every process, even when this process's part failed
//! (a failure travels as a flag in the reduction), so no process waits for
//! one that gave up.

use serde::Serialize;

use super::Collective;
use super::exact::ExactSum;
use crate::diagnose::completion::max_det_completion;
use crate::error::{LacunaError, Result};
use crate::schemes::{Diagnostics, MeanResult};
use crate::schemes::{InitRule, MaskedKarcherProblem};
use crate::solve::{Evaluation, IterRecord, SpdProblem, StopRule, lbfgs};
use crate::spd::kernels::sym_eigen;
use crate::spd::{Mat, symmetrize};
use crate::trials::TrialSet;
use crate::trials::shards::{CHUNK_BYTES, ShardReader, chunk_trials};

/// Largest |ln λ| of a positive double: bounds the whitened cost terms.
const LOG_RANGE: f64 = 745.0;

/// Where a shard's trials come from: held in memory (read once, in chunks)
/// or read again, chunk by chunk, at every pass (`--stream`).
pub enum ShardSource {
    Held(Vec<TrialSet>),
    Streamed(ShardReader),
}

/// One shard this process holds: its position in the whole list and its trials.
pub struct LocalShard {
    pub index: usize,
    pub source: ShardSource,
}

impl LocalShard {
    /// Reads the whole shard now, chunk by chunk.
    pub fn held(index: usize, reader: &ShardReader, chunk_bytes: usize) -> Result<Self> {
        let sets = reader
            .chunks(chunk_bytes)
            .into_iter()
            .map(|r| reader.read(r))
            .collect::<Result<_>>()?;
        Ok(LocalShard {
            index,
            source: ShardSource::Held(sets),
        })
    }

    /// A trial set already in memory, cut into the same chunks.
    pub fn from_set(index: usize, set: &TrialSet, chunk_bytes: usize) -> Result<Self> {
        let step = chunk_trials(set.n_channels(), chunk_bytes);
        let mut sets = Vec::new();
        for a in (0..set.len()).step_by(step) {
            let idx: Vec<usize> = (a..(a + step).min(set.len())).collect();
            let trials = idx.iter().map(|&i| set.trials()[i].clone()).collect();
            let mut part = TrialSet::new(set.channels().to_vec(), trials, None, "a shard's chunk")?;
            part.set_part_weights(idx.iter().map(|&i| set.weights()[i]).collect())?;
            sets.push(part);
        }
        Ok(LocalShard {
            index,
            source: ShardSource::Held(sets),
        })
    }

    /// Reads the shard at every pass.
    pub fn streamed(index: usize, reader: ShardReader) -> Self {
        LocalShard {
            index,
            source: ShardSource::Streamed(reader),
        }
    }

    pub fn len(&self) -> usize {
        match &self.source {
            ShardSource::Held(sets) => sets.iter().map(TrialSet::len).sum(),
            ShardSource::Streamed(r) => r.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    pub fn channels(&self) -> Vec<String> {
        match &self.source {
            ShardSource::Held(sets) => sets
                .first()
                .map(|s| s.channels().to_vec())
                .unwrap_or_default(),
            ShardSource::Streamed(r) => r.channels().to_vec(),
        }
    }

    /// `f` on every chunk in order (read from disk when streamed).
    fn for_each_chunk(
        &self,
        chunk_bytes: usize,
        f: &mut dyn FnMut(&TrialSet) -> Result<()>,
    ) -> Result<()> {
        match &self.source {
            ShardSource::Held(sets) => sets.iter().try_for_each(f),
            ShardSource::Streamed(r) => r
                .chunks(chunk_bytes)
                .into_iter()
                .try_for_each(|range| f(&r.read(range)?)),
        }
    }
}

/// Settings of a distributed run (those of `MeanJob` that apply).
#[derive(Debug, Clone)]
pub struct ShardedMeanJob {
    pub stop: StopRule,
    pub init: InitRule,
    /// Stack bytes per chunk: the unit of every sum (and of reading when
    /// streamed). Must be the same on every process.
    pub chunk_bytes: usize,
}

impl ShardedMeanJob {
    pub fn new(stop: StopRule, init: InitRule) -> Self {
        ShardedMeanJob {
            stop,
            init,
            chunk_bytes: CHUNK_BYTES,
        }
    }
}

/// What a distributed run found (identical on every process).
pub struct ShardedMean {
    pub result: MeanResult,
    pub channels: Vec<String>,
    /// Trials per shard, in shard order (all shards, not only this process's).
    pub shard_trials: Vec<usize>,
    /// Trials per process.
    pub rank_trials: Vec<usize>,
    /// Trials observing both channels.
    pub coobservation: Vec<Vec<usize>>,
    /// The shards were read again at every pass.
    pub streamed: bool,
}

impl ShardedMean {
    pub fn n_trials(&self) -> usize {
        self.shard_trials.iter().sum()
    }
}

/// Every process learns whether any failed; the first failing process's
/// message reaches all (exit code 3: its input could not be read).
fn agree(world: &dyn Collective, local: Result<()>) -> Result<()> {
    let message = match &local {
        Ok(()) => String::new(),
        Err(e) => e.to_string(),
    };
    let all = world.gather_messages(&message);
    let Some((rank, first)) = all.iter().enumerate().find(|(_, m)| !m.is_empty()) else {
        return Ok(());
    };
    if rank == world.rank() {
        return local;
    }
    Err(LacunaError::OnProcess {
        rank,
        exit_code: 3,
        message: first.clone(),
    })
}

/// Sums `local` over all processes; a local failure (Err) is announced to
/// every process first, so all return Err together instead of waiting.
fn reduce_exact(
    world: &dyn Collective,
    local: Result<ExactSum>,
    len: usize,
    bits: i32,
    what: &str,
) -> Result<Vec<f64>> {
    let (mut acc, failed) = match local {
        Ok(a) => (a, 0),
        Err(_) => (ExactSum::new(len, bits), 1),
    };
    let mut flag = [failed];
    world.sum_i64(&mut flag);
    if flag[0] > 0 {
        return Err(LacunaError::Numerical(format!(
            "{} process(es) could not form their part of {what} (a value outside the exact-sum range)",
            flag[0]
        )));
    }
    acc.all_reduce(world)?;
    Ok(acc.values())
}

/// The cost over every process's shards.
struct ShardedProblem<'a> {
    world: &'a dyn Collective,
    shards: &'a [LocalShard],
    /// Prepared problems of held chunks, per shard (None when streamed).
    held: Vec<Option<Vec<MaskedKarcherProblem<'a>>>>,
    total: f64,
    chunk_bytes: usize,
    p: usize,
    free_pairs: Vec<[usize; 2]>,
    bits: i32,
    /// A read failed somewhere: every later evaluation is refused without
    /// collective calls (all processes know it from the same reduction).
    aborted: std::sync::atomic::AtomicBool,
    /// This process's read error, if it had one.
    error: std::sync::Mutex<Option<LacunaError>>,
}

impl SpdProblem for ShardedProblem<'_> {
    fn size(&self) -> usize {
        self.p
    }

    fn evaluate(&self, w: &Mat) -> Option<Evaluation> {
        use std::sync::atomic::Ordering;
        if self.aborted.load(Ordering::SeqCst) {
            return None;
        }
        let p = self.p;
        // Layout: cost, hint, singular chunks, failed reads, then the p×p
        // whitened gradient.
        let len = 4 + p * p;
        let row_of = |e: Option<Evaluation>| {
            let mut row = vec![0.0; len];
            match e {
                Some(e) => {
                    row[0] = e.cost;
                    row[1] = e
                        .step_hint
                        .map_or(0.0, |h| if h > 0.0 { 2.0 / h } else { 0.0 });
                    row[4..].copy_from_slice(e.grad.as_slice());
                }
                None => row[2] = 1.0,
            }
            row
        };
        let local = (|| -> Result<ExactSum> {
            let mut acc = ExactSum::new(len, self.bits);
            for (shard, held) in self.shards.iter().zip(&self.held) {
                match held {
                    Some(problems) => {
                        for problem in problems {
                            acc.add(&row_of(problem.evaluate(w)))?;
                        }
                    }
                    None => {
                        let read = shard.for_each_chunk(self.chunk_bytes, &mut |set| {
                            let problem = MaskedKarcherProblem::with_weight_total(set, self.total);
                            acc.add(&row_of(problem.evaluate(w)))
                        });
                        if let Err(e) = read {
                            let mut row = vec![0.0; len];
                            row[3] = 1.0;
                            acc.add(&row)?;
                            *self.error.lock().unwrap_or_else(|p| p.into_inner()) = Some(e);
                            break;
                        }
                    }
                }
            }
            Ok(acc)
        })();
        let total = reduce_exact(self.world, local, len, self.bits, "an evaluation").ok()?;
        if total[3] > 0.0 {
            self.aborted.store(true, Ordering::SeqCst);
            return None;
        }
        if total[2] > 0.0 {
            return None;
        }
        let grad = symmetrize(&Mat::from_column_slice(p, p, &total[4..]));
        Some(Evaluation {
            cost: total[0],
            grad,
            step_hint: (total[1] > 0.0).then(|| 2.0 / total[1]),
        })
    }

    fn canonical(&self, x: &Mat) -> Option<Mat> {
        if self.free_pairs.is_empty() {
            return None;
        }
        Some(max_det_completion(x, &self.free_pairs).matrix)
    }
}

impl ShardedMeanJob {
    /// Runs the masked mean over `mine` (this process's shards) and every
    /// other process's, for `n_shards` shards in all over `channels`.
    pub fn run(
        &self,
        world: &dyn Collective,
        channels: &[String],
        n_shards: usize,
        mine: &[LocalShard],
        observer: Option<&(dyn Fn(&IterRecord) + Sync)>,
    ) -> Result<ShardedMean> {
        self.stop.check()?;
        if self.chunk_bytes == 0 {
            return Err(LacunaError::InvalidOption(
                "chunk_bytes must be positive".into(),
            ));
        }
        let p = channels.len();
        let cb = self.chunk_bytes;

        // Trials per shard and per process (integers: exact).
        let mut counts = vec![0i64; n_shards + world.size()];
        for s in mine {
            counts[s.index] = s.len() as i64;
            counts[n_shards + world.rank()] += s.len() as i64;
        }
        world.sum_i64(&mut counts);
        let shard_trials: Vec<usize> = counts[..n_shards].iter().map(|&c| c as usize).collect();
        let rank_trials: Vec<usize> = counts[n_shards..].iter().map(|&c| c as usize).collect();
        let n_trials: usize = shard_trials.iter().sum();

        // One pass: co-observation counts, the largest weight and entry, and
        // each chunk's weight sum (checked reads: a failure stops everyone).
        let mut co = vec![0i64; p * p];
        let (mut wmax, mut cmax) = (0.0f64, 0.0f64);
        let mut chunk_weights: Vec<f64> = Vec::new();
        let first_pass = mine.iter().try_for_each(|s| {
            s.for_each_chunk(cb, &mut |set| {
                for t in set.trials() {
                    for &a in &t.observed {
                        for &b in &t.observed {
                            co[a * p + b] += 1;
                        }
                    }
                    cmax = t.block.iter().fold(cmax, |m, v| m.max(v.abs()));
                }
                wmax = set.weights().iter().copied().fold(wmax, f64::max);
                chunk_weights.push(set.weights().iter().sum());
                Ok(())
            })
        });
        agree(world, first_pass)?;
        world.sum_i64(&mut co);
        let coobservation: Vec<Vec<usize>> = (0..p)
            .map(|a| (0..p).map(|b| co[a * p + b] as usize).collect())
            .collect();
        let never: Vec<usize> = (0..p).filter(|&c| co[c * p + c] == 0).collect();
        if let Some(&c) = never.first() {
            return Err(LacunaError::NeverObserved {
                channel: channels[c].clone(),
                count: never.len(),
            });
        }
        let free_pairs: Vec<[usize; 2]> = (0..p)
            .flat_map(|a| ((a + 1)..p).map(move |b| [a, b]))
            .filter(|&[a, b]| co[a * p + b] == 0)
            .collect();

        // Weight total, from the chunks' sums.
        let wmax = world.max_f64(wmax);
        let cmax = world.max_f64(cmax);
        let wbits = ExactSum::magnitude_bits(wmax * n_trials as f64);
        let local = (|| {
            let mut acc = ExactSum::new(1, wbits);
            for &w in &chunk_weights {
                acc.add(&[w])?;
            }
            Ok(acc)
        })();
        let total = reduce_exact(world, local, 1, wbits, "the weight total")?[0];
        if !(total > 0.0) {
            return Err(LacunaError::InvalidOption(
                "every trial weight is zero across the shards".into(),
            ));
        }

        let x0 = self.start(world, p, total, cmax, mine)?;

        let held: Vec<Option<Vec<MaskedKarcherProblem>>> = mine
            .iter()
            .map(|s| match &s.source {
                ShardSource::Held(sets) => Some(
                    sets.iter()
                        .map(|set| MaskedKarcherProblem::with_weight_total(set, total))
                        .collect(),
                ),
                ShardSource::Streamed(_) => None,
            })
            .collect();
        let streamed = held.iter().any(Option::is_none);
        let problem = ShardedProblem {
            world,
            shards: mine,
            held,
            total,
            chunk_bytes: cb,
            p,
            free_pairs: free_pairs.clone(),
            bits: ExactSum::magnitude_bits(0.5 * p as f64 * LOG_RANGE * LOG_RANGE),
            aborted: std::sync::atomic::AtomicBool::new(false),
            error: std::sync::Mutex::new(None),
        };
        let sol = lbfgs::minimize(&problem, &x0, &self.stop, observer);
        if problem.aborted.load(std::sync::atomic::Ordering::SeqCst) {
            let own = problem
                .error
                .lock()
                .unwrap_or_else(|p| p.into_inner())
                .take();
            agree(world, own.map_or(Ok(()), Err))?;
            return Err(LacunaError::Numerical(
                "a shard could not be read again during the solve".into(),
            ));
        }
        let sol = sol.ok_or_else(|| {
            LacunaError::Numerical(format!(
                "starting point '{}' makes an observed sub-block singular",
                self.init.name()
            ))
        })?;
        let mut diagnostics = Diagnostics::from_solution(&sol, self.stop.tol);
        diagnostics.notes.push(format!(
            "started from the {} rule; {} shards over {} process(es){}, summed exactly per chunk of {} MiB of stack (fixed point), so the result does not depend on the number of processes or threads",
            self.init.name(),
            n_shards,
            world.size(),
            if streamed { ", read again at every evaluation" } else { "" },
            cb >> 20
        ));
        diagnostics.unconstrained_pairs = free_pairs.clone();
        diagnostics.completed_pairs = free_pairs.len();
        if !free_pairs.is_empty() {
            diagnostics.notes.push(format!(
                "{} channel pair(s) are never observed together; their covariances were kept at the maximum-determinant completion throughout the solve",
                free_pairs.len()
            ));
        }
        let mean = max_det_completion(&sol.x, &free_pairs).matrix;
        Ok(ShardedMean {
            result: MeanResult {
                scheme: "airm-observed".into(),
                mean,
                diagnostics,
            },
            channels: channels.to_vec(),
            shard_trials,
            rank_trials,
            coobservation,
            streamed,
        })
    }

    /// The starting point of `InitRule` from sums over all shards.
    fn start(
        &self,
        world: &dyn Collective,
        p: usize,
        total: f64,
        cmax: f64,
        mine: &[LocalShard],
    ) -> Result<Mat> {
        let cb = self.chunk_bytes;
        // Per channel Σ ŵ ln C_aa and Σ ŵ; per pair Σ ŵ C_ab and Σ ŵ
        // (ŵ = w / total), each chunk's float sums added exactly.
        let len = 2 * p + 2 * p * p;
        let bits = ExactSum::magnitude_bits(LOG_RANGE.max(cmax).max(1.0));
        let local = (|| {
            let mut acc = ExactSum::new(len, bits);
            for s in mine {
                s.for_each_chunk(cb, &mut |set| {
                    let mut row = vec![0.0; len];
                    for (t, &w) in set.trials().iter().zip(set.weights()) {
                        let wi = w / total;
                        for (a, &ca) in t.observed.iter().enumerate() {
                            row[ca] += wi * t.block[(a, a)].ln();
                            row[p + ca] += wi;
                            for (b, &cb) in t.observed.iter().enumerate() {
                                row[2 * p + ca * p + cb] += wi * t.block[(a, b)];
                                row[2 * p + p * p + ca * p + cb] += wi;
                            }
                        }
                    }
                    acc.add(&row)
                })?;
            }
            Ok(acc)
        })();
        let v = reduce_exact(world, local, len, bits, "the starting point")?;
        let var: Vec<f64> = (0..p)
            .map(|c| {
                if v[p + c] > 0.0 {
                    (v[c] / v[p + c]).exp()
                } else {
                    1.0
                }
            })
            .collect();
        Ok(match self.init {
            InitRule::Diagonal => Mat::from_diagonal(&nalgebra::DVector::from_vec(var)),
            InitRule::ScaledIdentity => {
                let g = (var.iter().map(|v| v.ln()).sum::<f64>() / p as f64).exp();
                Mat::identity(p, p) * g
            }
            InitRule::AvailableCase => {
                let avg = Mat::from_fn(p, p, |a, b| {
                    let w = v[2 * p + p * p + a * p + b];
                    if w > 0.0 {
                        v[2 * p + a * p + b] / w
                    } else {
                        0.0
                    }
                });
                // As InitRule::AvailableCase: floor the spectrum at 1e-3 of
                // the mean variance (common practice, no source).
                let floor = 1e-3 * avg.trace() / p as f64;
                sym_eigen(&symmetrize(&avg)).apply(|v| v.max(floor))
            }
        })
    }
}

/// The JSON report of a distributed `lacuna mean` (report_version "1").
#[derive(Debug, Serialize)]
pub struct ShardedReport<'a> {
    pub report_version: &'static str,
    pub lacuna_version: &'static str,
    pub caution: &'static str,
    pub scheme: &'a str,
    pub converged: bool,
    pub stop_reason: Option<crate::solve::StopReason>,
    pub iterations: usize,
    pub evaluations: usize,
    pub gradient_norm: Option<f64>,
    pub gradient_norm_definition: &'static str,
    pub tolerance: Option<f64>,
    pub cost: Option<f64>,
    pub wall_time_seconds: f64,
    pub processes: usize,
    pub threads_per_process: usize,
    pub trials_per_process: &'a [usize],
    pub n_trials: usize,
    pub channels: &'a [String],
    pub shards: Vec<ShardRow>,
    pub unconstrained_pairs: &'a [[usize; 2]],
    pub coobservation: &'a [Vec<usize>],
    pub provenance: Option<crate::report::provenance::Provenance>,
    pub notes: &'a [String],
    pub trace: &'a [IterRecord],
}

/// One shard in the distributed report.
#[derive(Debug, Serialize)]
pub struct ShardRow {
    pub file: String,
    pub first_trial: usize,
    pub trials: usize,
    pub process: usize,
}

impl ShardedMean {
    /// The report, with the shard files in order.
    pub fn report<'a>(
        &'a self,
        files: &[String],
        processes: usize,
        wall_time_seconds: f64,
        provenance: Option<crate::report::provenance::Provenance>,
    ) -> ShardedReport<'a> {
        let d = &self.result.diagnostics;
        let mut first = 0;
        let shards = files
            .iter()
            .zip(&self.shard_trials)
            .enumerate()
            .map(|(j, (f, &n))| {
                let row = ShardRow {
                    file: f.clone(),
                    first_trial: first,
                    trials: n,
                    process: super::owner(j, processes),
                };
                first += n;
                row
            })
            .collect();
        ShardedReport {
            report_version: crate::report::json::REPORT_VERSION,
            lacuna_version: env!("CARGO_PKG_VERSION"),
            caution: crate::jobs::comparison::CAUTION,
            scheme: &self.result.scheme,
            converged: d.converged,
            stop_reason: d.stop_reason,
            iterations: d.iterations,
            evaluations: d.evaluations,
            gradient_norm: d.gradient_norm,
            gradient_norm_definition: crate::report::json::GRADIENT_NORM_DEFINITION,
            tolerance: d.tolerance,
            cost: d.cost,
            wall_time_seconds,
            processes,
            threads_per_process: rayon::current_num_threads(),
            trials_per_process: &self.rank_trials,
            n_trials: self.n_trials(),
            channels: &self.channels,
            shards,
            unconstrained_pairs: &d.unconstrained_pairs,
            coobservation: &self.coobservation,
            provenance,
            notes: &d.notes,
            trace: &d.trace,
        }
    }
}

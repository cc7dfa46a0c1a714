//! The ingest pipeline: recording(s) → epochs → mask with reasons → covariances.
//!
//! Each recording (one per session) is read in chunks of nearby epochs plus
//! a margin on both sides, long enough for the filters' impulse responses to
//! decay below 1e-6 of their peak; every chunk is filtered forward–backward
//! and cut into epochs. Memory is bounded by the chunk, not the recording.
//! Per epoch we keep only the detection statistics and the second (and, for
//! Ledoit–Wolf, fourth) moments of all channels; the session-relative flat
//! rule and the user's marks are decided once the session is read, and each
//! epoch's covariance is then estimated on exactly its observed channels.
//! Within a chunk, channels are filtered in parallel and epochs are measured
//! in parallel; results do not depend on the thread count.

use rayon::prelude::*;
use serde::Serialize;

use crate::Mat;
use crate::error::{LacunaError, Result};
use crate::ingest::SignalSource;
use crate::ingest::covariance::{Estimator, Moments};
use crate::ingest::detect::{
    ChannelStats, DetectOptions, Reason, hard_reason, mad, quantile_in_place, relative_reasons,
    robust_sd,
};
use crate::ingest::epochs::EpochSpec;
use crate::ingest::filter::{Band, Sos, butterworth};
use crate::trials::{Trial, TrialSet};

/// Options of the pipeline.
#[derive(Debug, Clone)]
pub struct ExtractOptions {
    /// Band-pass edges in Hz; None = no band filter.
    pub band: Option<(f64, f64)>,
    /// Butterworth prototype order of the band-pass.
    pub order: usize,
    pub estimator: Estimator,
    pub detect: DetectOptions,
    /// Channels to keep, in this order (None = all channels of the recording).
    pub channels: Option<Vec<String>>,
    /// Channels the user marks bad everywhere.
    pub bad_channels: Vec<String>,
    /// A full mask (epochs of all sessions × channels, true = observed) that
    /// replaces detection's decisions.
    pub user_mask: Option<Vec<bool>>,
    /// Longest stretch of epochs read and filtered at once, in seconds.
    pub chunk_seconds: f64,
}

impl Default for ExtractOptions {
    fn default() -> Self {
        ExtractOptions {
            band: None,
            order: 4,
            estimator: Estimator::Oas,
            detect: DetectOptions::default(),
            channels: None,
            bad_channels: Vec::new(),
            user_mask: None,
            chunk_seconds: 30.0,
        }
    }
}

/// One recording to cut.
pub struct SessionInput {
    pub session: String,
    pub source: Box<dyn SignalSource + Send>,
    pub epochs: Vec<EpochSpec>,
    /// Each epoch is filtered on its own (ready epochs from NPY).
    pub isolated: bool,
}

/// What one epoch became.
#[derive(Debug, Clone, Serialize)]
pub struct EpochInfo {
    pub session: String,
    /// Seconds from the start of the session's recording.
    pub onset: f64,
    pub duration: f64,
    /// Samples in the window.
    pub samples: usize,
    pub label: Option<String>,
    /// Shrinkage intensity of the covariance estimator (0 for sample).
    pub shrinkage: f64,
    /// Numerical rank of the observed block's sample covariance.
    pub rank: usize,
    pub observed: usize,
}

/// One masked (epoch, channel) cell.
#[derive(Debug, Clone, Serialize)]
pub struct MaskedCell {
    pub epoch: usize,
    pub channel: String,
    pub reason: Reason,
    pub stats: ChannelStats,
}

/// The pipeline's result.
#[derive(Debug, Clone)]
pub struct Extraction {
    pub channels: Vec<String>,
    pub sampling_rates: Vec<f64>,
    pub epochs: Vec<EpochInfo>,
    /// Epochs × channels, true = observed.
    pub mask: Vec<bool>,
    pub masked: Vec<MaskedCell>,
    /// Each epoch's covariance on its observed channels.
    pub blocks: Vec<Mat>,
    /// Epochs with no observed channel: not trials, listed with their session.
    pub empty_epochs: Vec<usize>,
    /// Channels of the recordings not used (other sampling rate, not selected).
    pub set_aside: Vec<String>,
    pub notes: Vec<String>,
}

impl Extraction {
    /// The trial set: one trial per epoch with at least one observed channel.
    pub fn trial_set(&self) -> Result<TrialSet> {
        let p = self.channels.len();
        let mut trials = Vec::new();
        let mut labels = Vec::new();
        let mut sessions = Vec::new();
        for (e, info) in self.epochs.iter().enumerate() {
            if self.empty_epochs.contains(&e) {
                continue;
            }
            let observed: Vec<usize> = (0..p).filter(|&c| self.mask[e * p + c]).collect();
            trials.push(Trial {
                observed,
                block: self.blocks[e].clone(),
            });
            labels.push(info.label.clone().unwrap_or_default());
            sessions.push(info.session.clone());
        }
        if trials.is_empty() {
            // Say which rules masked what, and how to loosen them.
            let mut by_reason: Vec<(&'static str, usize)> = Vec::new();
            for m in &self.masked {
                let r = m.reason.name();
                match by_reason.iter_mut().find(|(n, _)| *n == r) {
                    Some(x) => x.1 += 1,
                    None => by_reason.push((r, 1)),
                }
            }
            let counts: Vec<String> = by_reason.iter().map(|(r, n)| format!("{r} {n}")).collect();
            return Err(crate::LacunaError::Unsupported(format!(
                "every channel of all {} epochs was masked ({} cells: {}), so no trial is left. Loosen the rules (--amplitude-z, --broadband-z, --min-correlation, --flat-ratio, --rail-fraction), turn detection off with --no-detect, or look at the epochs with --mask-report",
                self.epochs.len(),
                self.masked.len(),
                if counts.is_empty() {
                    "none recorded".into()
                } else {
                    counts.join(", ")
                }
            )));
        }
        let mut set = TrialSet::new(self.channels.clone(), trials, None, "extracted epochs")?;
        if labels.iter().any(|l| !l.is_empty()) {
            set.labels = Some(labels);
        }
        set.sessions = Some(sessions);
        Ok(set)
    }
}

/// Runs the pipeline over all sessions. `progress(done, total)` is called
/// with samples processed so far.
pub fn extract(
    inputs: Vec<SessionInput>,
    opts: &ExtractOptions,
    progress: &(dyn Fn(u64, u64) + Sync),
) -> Result<Extraction> {
    if inputs.is_empty() {
        return Err(LacunaError::InvalidOption("no recording given".into()));
    }
    // Channel selection, checked against every recording.
    let first_names = inputs[0].source.channel_names().to_vec();
    let wanted = opts.channels.clone().unwrap_or_else(|| first_names.clone());
    let mut selections = Vec::new();
    for input in &inputs {
        let names = input.source.channel_names();
        let mut idx = Vec::with_capacity(wanted.len());
        for w in &wanted {
            match names.iter().position(|n| n == w) {
                Some(i) => idx.push(i),
                None => {
                    return Err(LacunaError::Unsupported(format!(
                        "{}: channel {w} does not exist; the recording has {}",
                        input.source.name(),
                        names.join(", ")
                    )));
                }
            }
        }
        selections.push(idx);
    }
    for b in &opts.bad_channels {
        if !wanted.contains(b) {
            return Err(LacunaError::Unsupported(format!(
                "bad channel {b} is not among the channels used ({})",
                wanted.join(", ")
            )));
        }
    }
    let p = wanted.len();
    let total_epochs: usize = inputs.iter().map(|i| i.epochs.len()).sum();
    if let Some(m) = &opts.user_mask
        && m.len() != total_epochs * p
    {
        return Err(LacunaError::Unsupported(format!(
            "the user mask has {} cells; {total_epochs} epochs × {p} channels need {}",
            m.len(),
            total_epochs * p
        )));
    }
    let total: u64 = inputs
        .iter()
        .map(|i| i.epochs.iter().map(|e| e.len as u64).sum::<u64>() * p as u64)
        .sum();
    let done = std::sync::atomic::AtomicU64::new(0);
    let mut out = Extraction {
        channels: wanted.clone(),
        sampling_rates: Vec::new(),
        epochs: Vec::new(),
        mask: Vec::new(),
        masked: Vec::new(),
        blocks: Vec::new(),
        empty_epochs: Vec::new(),
        set_aside: Vec::new(),
        notes: Vec::new(),
    };
    for (input, sel) in inputs.into_iter().zip(&selections) {
        for (k, n) in input.source.channel_names().iter().enumerate() {
            let why = format!("{n} (not selected)");
            if !sel.contains(&k) && !out.set_aside.contains(&why) {
                out.set_aside.push(why);
            }
        }
        for why in input.source.set_aside() {
            if !out.set_aside.contains(&why) {
                out.set_aside.push(why);
            }
        }
        let offset = out.epochs.len();
        let measured = measure_session(&input, sel, opts, &|n| {
            let d = done.fetch_add(n, std::sync::atomic::Ordering::Relaxed) + n;
            progress(d, total);
        })?;
        out.sampling_rates.push(input.source.sampling_rate());
        if let Some(note) = measured.note.clone()
            && !out.notes.contains(&note)
        {
            out.notes.push(note);
        }
        decide_session(&input, measured, opts, &wanted, offset, &mut out)?;
    }
    Ok(out)
}

/// Per-epoch measurements of one session.
struct Measured {
    stats: Vec<Vec<ChannelStats>>,
    moments: Vec<Moments>,
    note: Option<String>,
}

struct Filters {
    band: Option<Sos>,
    highpass: Sos,
    lowpass: Option<Sos>,
    margin: usize,
}

fn design_filters(
    fs: f64,
    opts: &ExtractOptions,
    isolated: bool,
) -> Result<(Filters, Option<String>)> {
    let band = match opts.band {
        Some((lo, hi)) => Some(butterworth(opts.order, Band::Bandpass(lo, hi), fs)?),
        None => None,
    };
    let highpass = butterworth(4, Band::Highpass(opts.detect.highpass_hz), fs)?;
    let (lowpass, note) = if opts.detect.split_hz * 1.2 < fs / 2.0 {
        (
            Some(butterworth(4, Band::Lowpass(opts.detect.split_hz), fs)?),
            None,
        )
    } else {
        (
            None,
            Some(format!(
                "sampling rate {fs} Hz is too low to separate noise above {} Hz: the high-frequency-noise rule was skipped",
                opts.detect.split_hz
            )),
        )
    };
    let cap = (120.0 * fs) as usize;
    let margin = if isolated {
        0
    } else {
        [Some(&highpass), band.as_ref(), lowpass.as_ref()]
            .into_iter()
            .flatten()
            .map(|s| s.settling_samples(1e-6, cap))
            .max()
            .unwrap_or(0)
    };
    Ok((
        Filters {
            band,
            highpass,
            lowpass,
            margin,
        },
        note,
    ))
}

/// A group of epochs read and filtered together: samples `from..to`.
struct Chunk {
    epochs: Vec<usize>,
    from: usize,
    to: usize,
}

fn plan_chunks(
    epochs: &[EpochSpec],
    n: usize,
    margin: usize,
    span: usize,
    isolated: bool,
) -> Vec<Chunk> {
    let mut order: Vec<usize> = (0..epochs.len()).collect();
    order.sort_by_key(|&e| (epochs[e].start, e));
    let mut chunks: Vec<Chunk> = Vec::new();
    for e in order {
        let (s, t) = (epochs[e].start, epochs[e].start + epochs[e].len);
        if !isolated && let Some(c) = chunks.last_mut() {
            let first = epochs[c.epochs[0]].start;
            if t.saturating_sub(first) <= span {
                c.epochs.push(e);
                c.to = c.to.max((t + margin).min(n));
                continue;
            }
        }
        chunks.push(Chunk {
            epochs: vec![e],
            from: s.saturating_sub(margin),
            to: (t + margin).min(n),
        });
    }
    chunks
}

/// Filtered versions of one channel of a chunk.
struct ChannelSignals {
    /// High-passed detection signal, one per epoch of the chunk, each
    /// computed from that epoch's own samples only (its linear trend removed,
    /// then filtered with its own padding): a fault in a neighbouring epoch
    /// cannot ring into it.
    detect: Vec<Vec<f64>>,
    /// Low-passed detection signal per epoch (when the rate allows).
    low: Option<Vec<Vec<f64>>>,
    /// The analysis signal (band-passed, or raw).
    analysis: Vec<f64>,
    /// Non-finite samples per epoch of the chunk, and rail fraction.
    non_finite: Vec<usize>,
    rail_fraction: Vec<f64>,
}

fn filter_channel(
    raw: &[f64],
    f: &Filters,
    epochs: &[(usize, usize)],
    rails: Option<(f64, f64)>,
) -> Result<ChannelSignals> {
    let non_finite = epochs
        .iter()
        .map(|&(s, l)| raw[s..s + l].iter().filter(|v| !v.is_finite()).count())
        .collect();
    let rail_fraction = epochs
        .iter()
        .map(|&(s, l)| match rails {
            Some((lo, hi)) => {
                let tol = 1e-9 * (hi - lo);
                raw[s..s + l]
                    .iter()
                    .filter(|&&v| (v - lo).abs() <= tol || (v - hi).abs() <= tol)
                    .count() as f64
                    / l as f64
            }
            None => 0.0,
        })
        .collect();
    let x = fill_non_finite(raw);
    let mut work = Vec::new();
    let mut detect = Vec::with_capacity(epochs.len());
    let mut lows = Vec::with_capacity(epochs.len());
    for &(s, l) in epochs {
        let mut d = detrended(&x[s..s + l]);
        f.highpass.filtfilt(&mut d, &mut work)?;
        if let Some(lp) = &f.lowpass {
            let mut lo = d.clone();
            lp.filtfilt(&mut lo, &mut work)?;
            lows.push(lo);
        }
        detect.push(d);
    }
    let low = f.lowpass.as_ref().map(|_| lows);
    let analysis = match &f.band {
        Some(b) => {
            let mut y = x;
            b.filtfilt(&mut y, &mut work)?;
            y
        }
        None => x,
    };
    Ok(ChannelSignals {
        detect,
        low,
        analysis,
        non_finite,
        rail_fraction,
    })
}

/// A segment minus its least-squares straight line (its own trend).
fn detrended(x: &[f64]) -> Vec<f64> {
    let n = x.len() as f64;
    let tm = (n - 1.0) / 2.0;
    let xm = x.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (i, &v) in x.iter().enumerate() {
        let t = i as f64 - tm;
        sxy += t * (v - xm);
        sxx += t * t;
    }
    let slope = if sxx > 0.0 { sxy / sxx } else { 0.0 };
    x.iter()
        .enumerate()
        .map(|(i, &v)| v - xm - slope * (i as f64 - tm))
        .collect()
}

/// Non-finite samples replaced by linear interpolation between finite
/// neighbours (constant at the ends; zeros if nothing is finite), so one
/// lost sample does not spread NaN through the filter. The epochs that
/// held them are masked anyway.
fn fill_non_finite(raw: &[f64]) -> Vec<f64> {
    let mut x = raw.to_vec();
    if x.iter().all(|v| v.is_finite()) {
        return x;
    }
    let finite: Vec<usize> = (0..x.len()).filter(|&i| x[i].is_finite()).collect();
    if finite.is_empty() {
        x.iter_mut().for_each(|v| *v = 0.0);
        return x;
    }
    let mut k = 0;
    for (i, v) in x.iter_mut().enumerate() {
        if v.is_finite() {
            continue;
        }
        while k + 1 < finite.len() && finite[k + 1] < i {
            k += 1;
        }
        let (a, b) = (finite[k], finite.get(k + 1).copied());
        *v = match b {
            _ if i < a => raw[a],
            Some(b) => raw[a] + (raw[b] - raw[a]) * (i - a) as f64 / (b - a) as f64,
            None => raw[a],
        };
    }
    x
}

fn measure_session(
    input: &SessionInput,
    sel: &[usize],
    opts: &ExtractOptions,
    progress: &(dyn Fn(u64) + Sync),
) -> Result<Measured> {
    let source = &input.source;
    let fs = source.sampling_rate();
    let (filters, note) = design_filters(fs, opts, input.isolated)
        .map_err(|e| LacunaError::Unsupported(format!("{}: {e}", source.name())))?;
    let rails: Option<Vec<(f64, f64)>> =
        source.rails().map(|r| sel.iter().map(|&k| r[k]).collect());
    let span = ((opts.chunk_seconds * fs) as usize).max(1);
    let chunks = plan_chunks(
        &input.epochs,
        source.n_samples(),
        filters.margin,
        span,
        input.isolated,
    );
    let p = sel.len();
    let lw = opts.estimator == Estimator::LedoitWolf;
    let mut stats: Vec<Option<Vec<ChannelStats>>> = vec![None; input.epochs.len()];
    let mut moments: Vec<Option<Moments>> = vec![None; input.epochs.len()];
    let mut reader = source.reopen()?;
    let mut raw_all = vec![Vec::new(); source.channel_names().len()];
    for chunk in &chunks {
        reader.read(chunk.from, chunk.to, &mut raw_all)?;
        let local: Vec<(usize, usize)> = chunk
            .epochs
            .iter()
            .map(|&e| (input.epochs[e].start - chunk.from, input.epochs[e].len))
            .collect();
        let signals: Vec<ChannelSignals> = sel
            .par_iter()
            .enumerate()
            .map(|(c, &k)| {
                filter_channel(&raw_all[k], &filters, &local, rails.as_ref().map(|r| r[c]))
            })
            .collect::<Result<_>>()
            .map_err(|e| LacunaError::Unsupported(format!("{}: {e}", source.name())))?;
        let measured: Vec<(Vec<ChannelStats>, Moments)> = (0..chunk.epochs.len())
            .into_par_iter()
            .map(|j| measure_epoch(&signals, j, local[j], p, lw))
            .collect();
        for (j, (s, m)) in measured.into_iter().enumerate() {
            stats[chunk.epochs[j]] = Some(s);
            moments[chunk.epochs[j]] = Some(m);
        }
        progress(local.iter().map(|&(_, l)| l as u64).sum::<u64>() * p as u64);
    }
    Ok(Measured {
        stats: stats
            .into_iter()
            .map(|s| s.expect("every epoch measured"))
            .collect(),
        moments: moments
            .into_iter()
            .map(|m| m.expect("every epoch measured"))
            .collect(),
        note,
    })
}

fn measure_epoch(
    signals: &[ChannelSignals],
    j: usize,
    (s, len): (usize, usize),
    p: usize,
    lw: bool,
) -> (Vec<ChannelStats>, Moments) {
    let mut scratch = Vec::with_capacity(len);
    let mut stats: Vec<ChannelStats> = signals
        .iter()
        .map(|sig| {
            let d = &sig.detect[j][..];
            // Amplitude above the split: the epoch minus its low-passed copy.
            let high_band_mad = sig.low.as_ref().map(|l| {
                let h: Vec<f64> = d.iter().zip(&l[j][..]).map(|(a, b)| a - b).collect();
                mad(&h, &mut scratch)
            });
            ChannelStats {
                non_finite: sig.non_finite[j],
                rail_fraction: sig.rail_fraction[j],
                robust_sd: robust_sd(d, &mut scratch),
                high_band_mad,
                max_correlation: 0.0,
            }
        })
        .collect();
    // Correlations among channels that are not plainly broken.
    let mut sds: Vec<f64> = stats.iter().map(|s| s.robust_sd).collect();
    let median_sd = quantile_in_place(&mut sds, 0.5);
    let eligible: Vec<usize> = (0..p)
        .filter(|&c| {
            stats[c].non_finite == 0
                && stats[c].rail_fraction < 0.5
                && stats[c].robust_sd > 1e-6 * median_sd
        })
        .collect();
    // One column per channel (contiguous copies), unit-norm after centring.
    let mut z = Mat::from_iterator(
        len,
        eligible.len(),
        eligible.iter().flat_map(|&c| {
            let sig = &signals[c];
            sig.low
                .as_ref()
                .map_or(&sig.detect[j], |l| &l[j])
                .iter()
                .copied()
        }),
    );
    for mut col in z.column_iter_mut() {
        let m = col.iter().sum::<f64>() / len as f64;
        col.add_scalar_mut(-m);
        let n = col.norm();
        if n > 0.0 {
            col /= n;
        }
    }
    let corr = z.transpose() * &z;
    for (a, &c) in eligible.iter().enumerate() {
        stats[c].max_correlation = (0..eligible.len())
            .filter(|&b| b != a)
            .map(|b| corr[(a, b)].abs())
            .fold(0.0, f64::max);
    }
    let y = Mat::from_iterator(
        len,
        p,
        signals
            .iter()
            .flat_map(|sig| sig.analysis[s..s + len].iter().copied()),
    );
    (stats, Moments::of_columns(&y, lw))
}

fn decide_session(
    input: &SessionInput,
    measured: Measured,
    opts: &ExtractOptions,
    channels: &[String],
    offset: usize,
    out: &mut Extraction,
) -> Result<()> {
    let p = channels.len();
    let n = input.epochs.len();
    let fs = input.source.sampling_rate();
    // Hard rules per epoch; the absolute flat floor is relative to the
    // epoch's median robust SD (exact zeros and rounding-level signals).
    let mut reasons: Vec<Vec<Option<Reason>>> = measured
        .stats
        .iter()
        .map(|st| {
            let mut sds: Vec<f64> = st.iter().map(|s| s.robust_sd).collect();
            let floor = 1e-6 * quantile_in_place(&mut sds, 0.5);
            st.iter()
                .map(|s| hard_reason(s, &opts.detect, floor))
                .collect()
        })
        .collect();
    // Session-relative flat rule: far below the channel's own median.
    if opts.detect.enabled {
        for c in 0..p {
            let mut v: Vec<f64> = reasons
                .iter()
                .zip(&measured.stats)
                .filter(|(r, _)| r[c].is_none())
                .map(|(_, st)| st[c].robust_sd)
                .collect();
            if v.is_empty() {
                continue;
            }
            let med = quantile_in_place(&mut v, 0.5);
            for (r, st) in reasons.iter_mut().zip(&measured.stats) {
                if r[c].is_none() && st[c].robust_sd < opts.detect.flat_ratio * med {
                    r[c] = Some(Reason::NoSignal);
                }
            }
        }
    }
    for (e, r) in reasons.iter_mut().enumerate() {
        let eligible: Vec<bool> = r.iter().map(Option::is_none).collect();
        let rel = relative_reasons(&measured.stats[e], &eligible, &opts.detect);
        for c in 0..p {
            if r[c].is_none() {
                r[c] = rel[c];
            }
            if r[c].is_none() && opts.bad_channels.contains(&channels[c]) {
                r[c] = Some(Reason::User);
            }
        }
        if let Some(m) = &opts.user_mask {
            for c in 0..p {
                r[c] = if m[(offset + e) * p + c] {
                    None
                } else {
                    Some(Reason::User)
                };
            }
        }
    }
    let blocks: Vec<(Mat, f64, usize)> = (0..n)
        .into_par_iter()
        .map(|e| {
            let o: Vec<usize> = (0..p).filter(|&c| reasons[e][c].is_none()).collect();
            if o.is_empty() {
                return (Mat::zeros(0, 0), 0.0, 0);
            }
            let est = measured.moments[e].estimate(&o, opts.estimator);
            (est.cov, est.shrinkage, est.rank)
        })
        .collect();
    for (e, (block, shrinkage, rank)) in blocks.into_iter().enumerate() {
        let spec = &input.epochs[e];
        let global = offset + e;
        let observed = reasons[e].iter().filter(|r| r.is_none()).count();
        for c in 0..p {
            out.mask.push(reasons[e][c].is_none());
            if let Some(reason) = reasons[e][c] {
                out.masked.push(MaskedCell {
                    epoch: global,
                    channel: channels[c].clone(),
                    reason,
                    stats: measured.stats[e][c],
                });
            }
        }
        if observed == 0 {
            out.empty_epochs.push(global);
        }
        out.epochs.push(EpochInfo {
            session: input.session.clone(),
            onset: spec.onset,
            duration: spec.len as f64 / fs,
            samples: spec.len,
            label: spec.label.clone(),
            shrinkage,
            rank,
            observed,
        });
        out.blocks.push(block);
    }
    Ok(())
}

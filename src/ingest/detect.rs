//! Dropout detection: for every epoch and channel, observed or not, and why.
//!
//! Each epoch is judged on its own samples (detrended and filtered per epoch,
//! see ingest/pipeline.rs), so a fault cannot change a neighbour's verdict.
//! Rules, in the order they are tried (the first that fires is the reason):
//! 1. `missing-samples`: any NaN or infinite sample.
//! 2. `saturated`: at least `rail_fraction` of the samples sit at the
//!    channel's digital minimum or maximum (the amplifier saturated); only
//!    for formats that carry digital limits (EDF/BDF). Common practice, no source.
//! 3. `no-signal`: robust SD of the high-passed signal at or below one digital
//!    step (or exactly 0 without digital limits), or below `flat_ratio`
//!    of the channel's own median robust SD over the session's epochs.
//!    Common practice, no source.
//! 4. `amplitude-outlier`: robust z-score of the channel's robust SD among
//!    the epoch's channels beyond `amplitude_z` in absolute value;
//! 5. `broadband-excess`: robust z-score of ln MAD(x − lowpass(x)), the
//!    amplitude above the split frequency on a log scale, among the epoch's
//!    channels, beyond `broadband_z`;
//! 6. `isolated`: largest absolute correlation with any other channel (on
//!    the low-passed signal) below `min_correlation`.
//!
//!    Rules 4–6 use published robust statistics: the robust SD
//!    0.7413 · IQR (the normal-consistent interquartile range), robust
//!    z-scores from the median and that SD, the ratio of high- to
//!    low-frequency amplitude, and the largest correlation with the other
//!    channels — the usual criteria for bad EEG channels in the literature
//!    on automated preprocessing (e.g. Bigdely-Shamlo et al. 2015, Front.
//!    Neuroinform. 9). They compare a channel with the epoch's other
//!    channels that passed rules 1–3. Thresholds are lacuna's own, chosen
//!    from a sweep over simulated scenarios with known faults
//!    (docs/ingest.md, "Choosing the thresholds").
//! 7. `user`: the channel was marked bad by the user (or a user mask).
//!
//! All rules work on the high-passed (1 Hz) signal so slow drifts do not
//! dominate.

use serde::{Deserialize, Serialize};

/// Why a channel was masked in an epoch.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Hash, PartialOrd, Ord)]
#[serde(rename_all = "kebab-case")]
pub enum Reason {
    MissingSamples,
    Saturated,
    NoSignal,
    AmplitudeOutlier,
    BroadbandExcess,
    Isolated,
    User,
}

impl Reason {
    /// The name used in files and messages.
    pub fn name(self) -> &'static str {
        match self {
            Reason::MissingSamples => "missing-samples",
            Reason::Saturated => "saturated",
            Reason::NoSignal => "no-signal",
            Reason::AmplitudeOutlier => "amplitude-outlier",
            Reason::BroadbandExcess => "broadband-excess",
            Reason::Isolated => "isolated",
            Reason::User => "user",
        }
    }
    /// All reasons, in rule order.
    pub const ALL: [Reason; 7] = [
        Reason::MissingSamples,
        Reason::Saturated,
        Reason::NoSignal,
        Reason::AmplitudeOutlier,
        Reason::BroadbandExcess,
        Reason::Isolated,
        Reason::User,
    ];
}

/// Thresholds of the detection rules (see the module documentation).
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct DetectOptions {
    /// Turn automatic detection off (only non-finite samples and user marks count).
    pub enabled: bool,
    pub rail_fraction: f64,
    /// Flat threshold: a robust SD below this fraction of the session's
    /// median is no signal (`--flat-ratio`; read as `flat_relative` from
    /// epochs.json version 1).
    #[serde(alias = "flat_relative")]
    pub flat_ratio: f64,
    /// Robust z of the channel's robust SD (either sign) beyond which it is an amplitude outlier.
    pub amplitude_z: f64,
    /// Robust z of the channel's log amplitude above the split beyond which it is a broadband excess.
    pub broadband_z: f64,
    pub min_correlation: f64,
    /// High-pass edge (Hz) of the detection signal.
    pub highpass_hz: f64,
    /// Split frequency (Hz): the broadband rule measures amplitude above it.
    pub split_hz: f64,
}

impl Default for DetectOptions {
    fn default() -> Self {
        DetectOptions {
            enabled: true,
            rail_fraction: 0.05,
            flat_ratio: 0.1,
            // Chosen from lacuna's threshold sweep (docs/ingest.md).
            amplitude_z: 6.0,
            broadband_z: 7.0,
            min_correlation: 0.5,
            highpass_hz: 1.0,
            split_hz: 45.0,
        }
    }
}

/// What detection measured for one channel in one epoch.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct ChannelStats {
    pub non_finite: usize,
    pub rail_fraction: f64,
    /// Robust SD (0.7413 · IQR) of the high-passed signal.
    pub robust_sd: f64,
    /// Median absolute deviation of the signal above the split frequency
    /// (the epoch minus its low-passed copy), when the sampling rate allows it.
    pub high_band_mad: Option<f64>,
    /// Largest |correlation| with another eligible channel.
    pub max_correlation: f64,
}

/// The q-quantile (numpy's default linear interpolation) of `v`, reordering `v`.
pub fn quantile_in_place(v: &mut [f64], q: f64) -> f64 {
    let n = v.len();
    if n == 0 {
        return f64::NAN;
    }
    let pos = q * (n - 1) as f64;
    let k = pos.floor() as usize;
    let frac = pos - k as f64;
    let (_, kth, right) = v.select_nth_unstable_by(k, f64::total_cmp);
    let lo = *kth;
    if frac == 0.0 || right.is_empty() {
        return lo;
    }
    let hi = right.iter().copied().fold(f64::INFINITY, f64::min);
    lo + frac * (hi - lo)
}

/// Robust SD = 0.7413 · IQR (the normal-consistent IQR scale).
pub fn robust_sd(x: &[f64], scratch: &mut Vec<f64>) -> f64 {
    scratch.clear();
    scratch.extend_from_slice(x);
    let q1 = quantile_in_place(scratch, 0.25);
    let q3 = quantile_in_place(scratch, 0.75);
    0.7413 * (q3 - q1)
}

/// Median absolute deviation from the median (unscaled).
pub fn mad(x: &[f64], scratch: &mut Vec<f64>) -> f64 {
    scratch.clear();
    scratch.extend_from_slice(x);
    let m = quantile_in_place(scratch, 0.5);
    for v in scratch.iter_mut() {
        *v = (*v - m).abs();
    }
    quantile_in_place(scratch, 0.5)
}

/// Robust z-scores of `values` (median and 0.7413 · IQR); None where the
/// spread is zero or too few values.
pub fn robust_z(values: &[f64]) -> Vec<Option<f64>> {
    if values.len() < 4 {
        return vec![None; values.len()];
    }
    let mut s = values.to_vec();
    let med = quantile_in_place(&mut s, 0.5);
    let spread = robust_sd(values, &mut s);
    values
        .iter()
        .map(|v| (spread > 0.0).then(|| (v - med) / spread))
        .collect()
}

/// ln of an amplitude, with 0 mapped to the smallest positive double's log
/// (a channel with nothing above the split is never a broadband excess).
fn log_amplitude(a: f64) -> f64 {
    a.max(f64::MIN_POSITIVE).ln()
}

/// The hard (per-channel) rules 1–3 except the session-relative flat rule.
pub fn hard_reason(s: &ChannelStats, opts: &DetectOptions, flat_floor: f64) -> Option<Reason> {
    if s.non_finite > 0 {
        return Some(Reason::MissingSamples);
    }
    if !opts.enabled {
        return None;
    }
    if s.rail_fraction >= opts.rail_fraction {
        return Some(Reason::Saturated);
    }
    if s.robust_sd <= flat_floor {
        return Some(Reason::NoSignal);
    }
    None
}

/// Rules 4–6 for one epoch, given which channels passed the hard rules.
pub fn relative_reasons(
    stats: &[ChannelStats],
    eligible: &[bool],
    opts: &DetectOptions,
) -> Vec<Option<Reason>> {
    let mut out = vec![None; stats.len()];
    if !opts.enabled {
        return out;
    }
    let idx: Vec<usize> = (0..stats.len()).filter(|&c| eligible[c]).collect();
    let dev = robust_z(&idx.iter().map(|&c| stats[c].robust_sd).collect::<Vec<_>>());
    // On a log scale: amplitudes are scale quantities, and a channel twice as
    // loud above the split should score the same whatever the cap's level.
    let broadband: Vec<Option<f64>> = if idx.iter().all(|&c| stats[c].high_band_mad.is_some()) {
        robust_z(
            &idx.iter()
                .map(|&c| log_amplitude(stats[c].high_band_mad.unwrap_or(0.0)))
                .collect::<Vec<_>>(),
        )
    } else {
        vec![None; idx.len()]
    };
    for (k, &c) in idx.iter().enumerate() {
        out[c] = if dev[k].is_some_and(|z| z.abs() > opts.amplitude_z) {
            Some(Reason::AmplitudeOutlier)
        } else if broadband[k].is_some_and(|z| z > opts.broadband_z) {
            Some(Reason::BroadbandExcess)
        } else if idx.len() > 1 && stats[c].max_correlation < opts.min_correlation {
            Some(Reason::Isolated)
        } else {
            None
        };
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    // numpy.quantile's default (linear) rule on a small case, worked by hand
    // (common practice, no source).
    #[test]
    fn quantiles_match_linear_rule() {
        let mut v = vec![4.0, 1.0, 3.0, 2.0];
        assert_eq!(quantile_in_place(&mut v, 0.25), 1.75);
        assert_eq!(quantile_in_place(&mut v, 0.75), 3.25);
        assert_eq!(quantile_in_place(&mut v, 0.5), 2.5);
        // IQR of a standard normal is 1.349, so 0.7413·IQR ≈ 1 (from memory).
        let x: Vec<f64> = {
            let mut r = crate::simulate::rng::Rng::new(1);
            (0..200_000).map(|_| r.normal()).collect()
        };
        let s = robust_sd(&x, &mut Vec::new());
        assert!((s - 1.0).abs() < 0.01, "{s}");
    }

    #[test]
    fn outlier_channel_is_flagged() {
        let base = ChannelStats {
            non_finite: 0,
            rail_fraction: 0.0,
            robust_sd: 10.0,
            high_band_mad: Some(0.1),
            max_correlation: 0.9,
        };
        let mut stats: Vec<ChannelStats> = (0..12)
            .map(|c| ChannelStats {
                robust_sd: 10.0 + c as f64 * 0.3,
                ..base
            })
            .collect();
        stats[3].robust_sd = 200.0;
        stats[5].max_correlation = 0.1;
        let r = relative_reasons(&stats, &[true; 12], &DetectOptions::default());
        assert_eq!(r[3], Some(Reason::AmplitudeOutlier));
        assert_eq!(r[5], Some(Reason::Isolated));
        assert_eq!(r.iter().filter(|x| x.is_some()).count(), 2);
    }
}

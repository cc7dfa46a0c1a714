//! One validated range per numeric option: NaN, infinities and values
//! outside the range are usage errors (exit 2) naming the option, never a
//! silent change of the user's value. The ranges are stated in `--help`.

use lacuna::{LacunaError, Result};

/// `lo ≤ v ≤ hi`, finite.
pub fn float_in(option: &str, v: f64, lo: f64, hi: f64) -> Result<()> {
    if v.is_finite() && v >= lo && v <= hi {
        Ok(())
    } else {
        Err(LacunaError::InvalidOption(format!(
            "{option} must be a finite number between {lo:e} and {hi:e}, got {v}"
        )))
    }
}

/// `lo ≤ v ≤ hi` for counts.
pub fn int_in(option: &str, v: usize, lo: usize, hi: usize) -> Result<()> {
    if v >= lo && v <= hi {
        Ok(())
    } else {
        Err(LacunaError::InvalidOption(format!(
            "{option} must be between {lo} and {hi}, got {v}"
        )))
    }
}

/// A job's setting error, with the setting named as its command-line flag
/// (`min_correlation must be …` becomes `--min-correlation must be …`).
pub fn as_flag(e: LacunaError) -> LacunaError {
    match e {
        LacunaError::InvalidOption(m) => match m.split_once(" must ") {
            Some((name, rest))
                if !name.is_empty() && name.chars().all(|c| c.is_ascii_lowercase() || c == '_') =>
            {
                LacunaError::InvalidOption(format!("--{} must {rest}", name.replace('_', "-")))
            }
            _ => LacunaError::InvalidOption(m.replacen("unknown init", "unknown --init", 1)),
        },
        other => other,
    }
}

//! Will a run fit in the memory this process may use?
//!
//! Under `ulimit -v` an allocation that does not fit aborts the process (no
//! clean error is possible afterwards), so commands estimate what they need
//! before they allocate it and refuse with the estimate when the process's
//! address-space limit (read from `/proc/self/limits`) is lower. Estimates are
//! deliberately generous: a refusal must not come from a run that would have
//! fitted by a wide margin, and an abort must not come from one that was let
//! through.

use crate::error::{LacunaError, Result};

/// Virtual memory a process of lacuna needs beyond its data: code, thread
/// stacks and the allocator's per-thread arenas (glibc reserves 64 MiB of
/// address space per arena).
pub fn baseline_bytes(threads: usize) -> u64 {
    (256 << 20) + threads as u64 * (72 << 20)
}

/// The address-space limit in bytes (`ulimit -v`), if one is set.
pub fn address_space_limit() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/self/limits").ok()?;
    let line = text.lines().find(|l| l.starts_with("Max address space"))?;
    let soft = line
        .trim_start_matches("Max address space")
        .split_whitespace()
        .next()?;
    soft.parse::<u64>().ok()
}

/// Refuses a run whose estimated need exceeds the limit, saying both.
pub fn check_fits(what: &str, data_bytes: u64, threads: usize) -> Result<()> {
    let need = data_bytes.saturating_add(baseline_bytes(threads));
    match address_space_limit() {
        Some(limit) if need > limit => Err(LacunaError::Unsupported(format!(
            "{what} needs about {:.0} MiB of memory (data {:.0} MiB plus {:.0} MiB for {threads} worker thread(s)), but this process may use {:.0} MiB (ulimit -v). Raise the limit, pass --threads 1, or split the input",
            need as f64 / 1048576.0,
            data_bytes as f64 / 1048576.0,
            baseline_bytes(threads) as f64 / 1048576.0,
            limit as f64 / 1048576.0
        ))),
        _ => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: the limits file of this process parses
    // (unlimited → None on most machines), and the message carries both sizes.
    #[test]
    fn estimate_is_reported() {
        let _ = address_space_limit();
        assert!(baseline_bytes(2) > baseline_bytes(1));
        assert!(check_fits("x", 0, 1).is_ok() || address_space_limit().is_some());
    }
}

//! lacuna's main tasks as library calls: what the command line and the
//! Python package both run, so the two give the same answers. Each job is a
//! settings struct with the CLI's defaults, checked once before any work,
//! and a `run` that returns typed results; writing files stays with the caller.

pub mod extract;
pub mod mean;

pub use extract::{ExtractJob, ExtractRun};
pub use mean::{MeanJob, MeanRun};
pub mod compare;
pub mod comparison;
pub mod decoder;
pub mod extraction_record;
pub mod grouped;
pub mod recentre;

pub use compare::CompareJob;
pub use comparison::Comparison;
pub use decoder::{Model, TrainJob};
pub use extraction_record::ExtractionRecord;
pub use grouped::{GrandWeighting, GroupBy, GroupedMeanJob, GroupedMeans};
pub use recentre::{RecentreJob, Recentred};

pub use crate::error::{float_in, int_in};

/// Electrode positions must be finite (an error names the first channel that is not).
pub fn check_positions(
    positions: &std::collections::BTreeMap<String, [f64; 3]>,
) -> crate::Result<()> {
    match positions
        .iter()
        .find(|(_, xyz)| xyz.iter().any(|v| !v.is_finite()))
    {
        Some((name, xyz)) => Err(crate::LacunaError::OutOfRange {
            setting: "positions".into(),
            value: format!("{name}: {xyz:?}"),
            allowed: "finite coordinates".into(),
        }),
        None => Ok(()),
    }
}

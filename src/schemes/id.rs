//! Schemes by identity: one enum value per scheme, its command-line name,
//! and its default iteration cap. Code that treats one scheme specially
//! compares ids, never names.

use serde::{Deserialize, Serialize};

use super::AveragingScheme;

/// Every scheme lacuna knows, in the order they are listed to users.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SchemeId {
    AirmObserved,
    #[serde(rename = "airm-observed-median")]
    ObservedMedian,
    #[serde(rename = "airm-observed-huber")]
    ObservedHuber,
    CompleteTrials,
    AvailableCase,
    DiagonalLoading,
    Shrinkage,
    CommonChannels,
    Subspace,
    GaussianEm,
    SphericalSpline,
    #[serde(rename = "airm")]
    Karcher,
    LogEuclidean,
    Arithmetic,
    Harmonic,
}

impl SchemeId {
    /// All ids, in the order they are listed to users.
    pub const ALL: [SchemeId; 15] = [
        SchemeId::AirmObserved,
        SchemeId::ObservedMedian,
        SchemeId::ObservedHuber,
        SchemeId::CompleteTrials,
        SchemeId::AvailableCase,
        SchemeId::DiagonalLoading,
        SchemeId::Shrinkage,
        SchemeId::CommonChannels,
        SchemeId::Subspace,
        SchemeId::GaussianEm,
        SchemeId::SphericalSpline,
        SchemeId::Karcher,
        SchemeId::LogEuclidean,
        SchemeId::Arithmetic,
        SchemeId::Harmonic,
    ];

    /// Name used on the command line, in Python and in reports.
    pub fn name(self) -> &'static str {
        match self {
            SchemeId::AirmObserved => "airm-observed",
            SchemeId::ObservedMedian => "airm-observed-median",
            SchemeId::ObservedHuber => "airm-observed-huber",
            SchemeId::CompleteTrials => "complete-trials",
            SchemeId::AvailableCase => "available-case",
            SchemeId::DiagonalLoading => "diagonal-loading",
            SchemeId::Shrinkage => "shrinkage",
            SchemeId::CommonChannels => "common-channels",
            SchemeId::Subspace => "subspace",
            SchemeId::GaussianEm => "gaussian-em",
            SchemeId::SphericalSpline => "spherical-spline",
            SchemeId::Karcher => "airm",
            SchemeId::LogEuclidean => "log-euclidean",
            SchemeId::Arithmetic => "arithmetic",
            SchemeId::Harmonic => "harmonic",
        }
    }

    /// The id of a name, if it is one.
    pub fn from_name(name: &str) -> Option<SchemeId> {
        SchemeId::ALL.into_iter().find(|id| id.name() == name)
    }

    /// The scheme itself.
    pub fn scheme(self) -> Box<dyn AveragingScheme> {
        use super::*;
        match self {
            SchemeId::AirmObserved => Box::new(AirmObserved),
            SchemeId::ObservedMedian => Box::new(ObservedMedian),
            SchemeId::ObservedHuber => Box::new(ObservedHuber),
            SchemeId::CompleteTrials => Box::new(CompleteTrials),
            SchemeId::AvailableCase => Box::new(AvailableCase),
            SchemeId::DiagonalLoading => Box::new(DiagonalLoading),
            SchemeId::Shrinkage => Box::new(Shrinkage),
            SchemeId::CommonChannels => Box::new(CommonChannels),
            SchemeId::Subspace => Box::new(Subspace),
            SchemeId::GaussianEm => Box::new(GaussianEm),
            SchemeId::SphericalSpline => Box::new(SphericalSpline),
            SchemeId::Karcher => Box::new(Karcher),
            SchemeId::LogEuclidean => Box::new(LogEuclidean),
            SchemeId::Arithmetic => Box::new(Arithmetic),
            SchemeId::Harmonic => Box::new(Harmonic),
        }
    }

    /// Iteration cap when the caller sets none: EM converges linearly and
    /// needs many cheap steps; the Riemannian solvers need few costly ones.
    pub fn default_max_iter(self) -> usize {
        match self {
            SchemeId::GaussianEm => 5000,
            _ => 500,
        }
    }

    /// Whether `compare` runs it when no `--schemes` are named. The robust
    /// means solve one masked mean per reweighting step (tens of them):
    /// asked for by name only.
    pub fn in_default_comparison(self) -> bool {
        !matches!(self, SchemeId::ObservedMedian | SchemeId::ObservedHuber)
    }
}

impl std::fmt::Display for SchemeId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: names, ids and schemes agree both ways,
    // and the serde spelling is the command-line name.
    #[test]
    fn ids_names_and_schemes_agree() {
        for id in SchemeId::ALL {
            assert_eq!(SchemeId::from_name(id.name()), Some(id));
            assert_eq!(id.scheme().id(), id);
            assert_eq!(id.scheme().name(), id.name());
            let json = serde_json::to_string(&id).unwrap();
            assert_eq!(json, format!("\"{}\"", id.name()));
        }
        assert_eq!(SchemeId::from_name("airm_observed"), None);
    }
}

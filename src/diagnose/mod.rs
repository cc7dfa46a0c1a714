//! Diagnostics computed from a trial set and a mean, never from a scheme's
//! internals: identifiability (co-observation), completion of unconstrained
//! entries, coverage, conditioning, the determinant ("swelling") check and
//! the rank table of rank-deficient trials.

pub mod completion;
pub mod identifiability;

pub use completion::max_det_completion;
pub use identifiability::{Identifiability, identifiability};
pub mod summary;
pub use summary::{MeanSummary, summarize};
pub mod ranks;
pub use ranks::{RankTable, rank_table};
pub mod contribution;
pub use contribution::{ChannelContribution, ContributionOptions, contributions};

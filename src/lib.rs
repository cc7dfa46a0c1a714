//! # lacuna
//!
//! Riemannian means of channel covariance matrices when trials lose channels.
//!
//! Multichannel recordings (EEG, MEG, intracranial, other sensor arrays) are
//! often summarised per trial by a channel covariance matrix and averaged on
//! the manifold of symmetric positive definite matrices. When a trial loses
//! channels its covariance is rank-deficient on the full channel set; lacuna
//! keeps only each trial's observed sub-block and fits a full-size mean to
//! those blocks ([`schemes::AirmObserved`]), beside the usual alternatives,
//! all behind one trait ([`schemes::AveragingScheme`]).
//!
//! Data flow: [`trials`] (validated trial set) → [`schemes`] (means, using
//! [`solve`] and [`spd`]) → [`diagnose`] → [`report`].
//!
//! Research software, not a medical device: results inform analysis; they do
//! not diagnose. Follow local rules and licensed clinical practice.

// `!(x > 0.0)` is used on purpose throughout: NaN must fail such checks.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

pub mod diagnose;
pub mod distributed;
pub mod electrodes;
pub mod error;
pub mod ingest;
pub mod jobs;
pub mod limits;
pub mod nullable;
pub mod output;
pub mod report;
pub mod schemes;
pub mod select;
pub mod simulate;
pub mod solve;
pub mod spd;
pub mod trials;

pub use error::{LacunaError, Result};
pub use schemes::{AveragingScheme, MeanResult, SchemeOptions, all_schemes, scheme_by_name};
pub use spd::Mat;
pub use trials::TrialSet;

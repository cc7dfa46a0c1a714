//! From recordings to a masked trial set.
//!
//! Signals come from a [`SignalSource`] (EDF/BDF file read record by record,
//! or a continuous CSV held in memory) or from ready epochs (NPY). The
//! pipeline ([`pipeline`]) cuts epochs ([`epochs`]), filters them
//! ([`filter`]), decides per epoch and channel whether the channel was
//! observed ([`detect`]), and estimates each epoch's covariance on its
//! observed channels ([`covariance`]).

pub mod covariance;
pub mod detect;
pub mod edf;
pub mod epochs;
pub mod filter;
pub mod pipeline;
pub mod text;

use serde::{Deserialize, Serialize};

use crate::error::Result;

/// An event: onset and duration in seconds from the start of the recording.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Event {
    pub onset: f64,
    pub duration: f64,
    pub label: String,
}

/// A continuous multichannel recording that can be read in sample ranges.
pub trait SignalSource {
    /// Names the source in messages (usually the file path).
    fn name(&self) -> String;
    /// Channel names, in order.
    fn channel_names(&self) -> &[String];
    /// Samples per second.
    fn sampling_rate(&self) -> f64;
    /// Samples per channel.
    fn n_samples(&self) -> usize;
    /// Physical values of each channel's digital minimum and maximum, when
    /// the format has them (used to detect railing).
    fn rails(&self) -> Option<Vec<(f64, f64)>>;
    /// Reads samples `start..end` of every channel into `out[c]` (cleared first).
    fn read(&mut self, start: usize, end: usize, out: &mut [Vec<f64>]) -> Result<()>;
    /// An independent handle on the same data.
    fn reopen(&self) -> Result<Box<dyn SignalSource + Send>>;
    /// Signals of the file not offered as channels, with why (e.g. another
    /// sampling rate).
    fn set_aside(&self) -> Vec<String> {
        Vec::new()
    }
}

/// A recording held in memory (continuous CSV input, tests, the simulator).
#[derive(Debug, Clone)]
pub struct InMemorySource {
    pub name: String,
    pub channels: Vec<String>,
    pub rate: f64,
    /// `data[c]` holds channel c.
    pub data: std::sync::Arc<Vec<Vec<f64>>>,
    pub rails: Option<Vec<(f64, f64)>>,
}

impl SignalSource for InMemorySource {
    fn name(&self) -> String {
        self.name.clone()
    }
    fn channel_names(&self) -> &[String] {
        &self.channels
    }
    fn sampling_rate(&self) -> f64 {
        self.rate
    }
    fn n_samples(&self) -> usize {
        self.data.first().map_or(0, Vec::len)
    }
    fn rails(&self) -> Option<Vec<(f64, f64)>> {
        self.rails.clone()
    }
    fn read(&mut self, start: usize, end: usize, out: &mut [Vec<f64>]) -> Result<()> {
        for (o, d) in out.iter_mut().zip(self.data.iter()) {
            o.clear();
            o.extend_from_slice(&d[start..end]);
        }
        Ok(())
    }
    fn reopen(&self) -> Result<Box<dyn SignalSource + Send>> {
        Ok(Box::new(self.clone()))
    }
}

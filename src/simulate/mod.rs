//! Generators for tests, benchmarks and the demo data. Everything is
//! deterministic from a seed.

pub mod headset;
pub mod recording;
pub mod rng;
pub mod stacks;

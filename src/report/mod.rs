//! Report writers: they format results, they compute nothing new beyond
//! read-only summaries of the trial set and mean.

pub mod json;

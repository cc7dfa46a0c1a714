//! Report writers: they format results, they compute nothing new beyond
//! read-only summaries of the trial set and mean.
//!
//! - `json`: the report of `lacuna mean`;
//! - `html`: the self-contained HTML report of `lacuna compare` / `lacuna report`,
//!   drawn with our own small SVG writer (`svg`) and CIELAB colour maps (`colors`).

pub mod charts;
pub mod colors;
pub mod epochs_check;
pub mod glossary;
pub mod html;
pub mod json;
pub mod provenance;
pub mod svg;
pub mod tables;

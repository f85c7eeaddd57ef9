//! grove: classical, CPU-only semantic segmentation trained from a few labelled images.
//!
//! The modules follow the data flow: `dataset` → `features` → `forest` → `segmenter`
//! (fit / predict) → `smooth` (optional CRF) → `eval` and `outputs`; `model` is the file
//! format; `demo` makes the built-in synthetic farm scenes; `batch` drives `apply` over many
//! images and shards; `cli` is the thin command layer and `serve` the web workspace, another
//! thin layer over the same calls.

pub mod atomic_write;
pub mod batch;
pub mod cli;
pub mod dataset;
pub mod demo;
pub mod error;
pub mod eval;
pub mod features;
pub mod forest;
pub mod image_check;
pub mod imageio;
pub mod model;
pub mod output_guard;
pub mod outputs;
pub mod plane;
pub mod prediction;
pub mod progress;
pub mod report;
pub mod segmenter;
pub mod serve;
pub mod smooth;
pub mod tiling;
pub mod train;

pub use error::{GroveError, Result};
pub use plane::Plane;

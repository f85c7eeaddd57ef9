//! Batch work: `apply` over thousands of images, split across the processes of a job
//! array, resumable after a crash or a pre-emption.
//!
//! - `inputs`: files, folders, glob patterns and `@list` files → image paths;
//! - `shard`: `--shard K/N`, a stable hash of each image's stem picks its shard;
//! - `record`: per-image resume records (model hash + settings) beside the outputs;
//! - `run`: the driver that skips complete images, predicts and writes the rest;
//! - `streamed`: one image too large to hold, read, predicted and written band by band;
//! - `merge`: one area table from the shards' output folders.
//!
//! The scheduler (Slurm, Kubernetes, GNU parallel) only starts processes; nothing here
//! talks to it.

pub mod inputs;
pub mod merge;
pub mod record;
pub mod run;
pub mod shard;
pub mod streamed;

pub use inputs::list_inputs;
pub use merge::merge_areas;
pub use record::{ImageRecord, Records};
pub use run::{BatchEvent, BatchJob, BatchSummary};
pub use shard::{shard_of, Shard};

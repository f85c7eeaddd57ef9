//! The built-in demo: a procedurally generated aerial (drone) view of a small farm with a
//! ground-truth class for every pixel, so grove can be tried and benchmarked without any
//! data. The class table and the scenario description live in `demo/` at the crate root.

mod layout;
pub mod noise;
mod scene;
mod texture;

mod write;

pub use scene::{render_scene, DemoScene};
pub use write::write_demo_dataset;

/// The demo's class table, in grove's class-table TOML format.
pub const DEMO_CLASSES_TOML: &str = include_str!("../../demo/classes.toml");

/// Class id of bare tilled soil (must match `demo/classes.toml`).
pub const SOIL: u8 = 0;
/// Class id of crop rows.
pub const CROP: u8 = 1;
/// Class id of standing water.
pub const WATER: u8 = 2;
/// Class id of the gravel farm track.
pub const TRACK: u8 = 3;
/// Class id of hedgerow / tree canopy.
pub const CANOPY: u8 = 4;
/// Number of demo classes.
pub const N_CLASSES: usize = 5;

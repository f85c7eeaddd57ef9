//! Writing demo scenes as a grove dataset folder.

use std::ops::Range;
use std::path::Path;

use rayon::prelude::*;

use crate::error::Result;
use crate::imageio::{write_atomic, write_label_png, write_rgb_png};

/// Writes scenes `indices` as `dir/images/farm_NNN.png`, `dir/labels/farm_NNN.png` and
/// `dir/classes.toml`.
pub fn write_demo_dataset(dir: &Path, indices: Range<u32>, size: usize, seed: u64) -> Result<()> {
    let table = crate::dataset::ClassTable::parse(super::DEMO_CLASSES_TOML, 255)
        .expect("the built-in demo class table is valid");
    let palette = table.palette();
    write_atomic(
        &dir.join("classes.toml"),
        super::DEMO_CLASSES_TOML.as_bytes(),
    )?;
    indices.into_par_iter().try_for_each(|i| {
        let scene = super::render_scene(seed, i, size, size);
        let name = format!("farm_{i:03}.png");
        write_rgb_png(&dir.join("images").join(&name), size, size, &scene.rgb)?;
        write_label_png(
            &dir.join("labels").join(&name),
            size,
            size,
            &scene.labels,
            &palette,
        )
    })
}

//! Smoothing tile by tile, for images whose probabilities never exist whole: each tile is
//! smoothed within a window that adds a fixed halo on every side, with the whole image's
//! contrast β, and only its core is kept. The CRF couples every pixel to every other, so
//! this is an approximation; a halo of [`SMOOTH_HALO`] pixels keeps the labels that differ
//! from whole-image smoothing rare (measured in `tests/tiling.rs`).

use crate::features::stack::Rect;
use crate::plane::Plane;
use crate::segmenter::Probabilities;
use crate::smooth::{contrast_beta, smooth, SmoothSettings};
use crate::tiling::TileGrid;

/// Halo in pixels added around each tile for smoothing.
pub const SMOOTH_HALO: usize = 32;

fn crop_plane(p: &Plane, r: &Rect) -> Plane {
    let mut data = Vec::with_capacity(r.area());
    for y in r.y..r.y + r.height {
        data.extend_from_slice(&p.data[y * p.width + r.x..][..r.width]);
    }
    Plane::from_vec(r.width, r.height, data)
}

fn crop_probs(p: &Probabilities, r: &Rect) -> Probabilities {
    let k = p.n_classes;
    let mut data = Vec::with_capacity(r.area() * k);
    for y in r.y..r.y + r.height {
        data.extend_from_slice(&p.data[(y * p.width + r.x) * k..][..r.width * k]);
    }
    Probabilities {
        width: r.width,
        height: r.height,
        n_classes: k,
        data,
    }
}

/// Labels of `probs` smoothed in tiles of `tile` pixels with `halo` pixels of context
/// (`tile` = 0: the whole image at once, as [`smooth`]). `colour` are the image's Lab planes;
/// β is the whole image's, so every tile minimises the same energy's terms.
pub fn smooth_labels_tiled(
    probs: &Probabilities,
    colour: &[Plane],
    settings: &SmoothSettings,
    tile: usize,
    halo: usize,
) -> Vec<u8> {
    let beta = contrast_beta(colour);
    let (w, h) = (probs.width, probs.height);
    let grid = TileGrid::new(w, h, tile, halo);
    let mut labels = vec![0u8; w * h];
    for band in grid.bands() {
        for t in &band.tiles {
            let window_colour: Vec<Plane> =
                colour.iter().map(|c| crop_plane(c, &t.window)).collect();
            let s = smooth(
                &crop_probs(probs, &t.window),
                &window_colour,
                settings,
                Some(beta),
            );
            let core = t.core_in_window();
            for y in 0..core.height {
                let from = (core.y + y) * t.window.width + core.x;
                let to = (t.core.y + y) * w + t.core.x;
                labels[to..to + core.width].copy_from_slice(&s.labels[from..from + core.width]);
            }
        }
    }
    labels
}

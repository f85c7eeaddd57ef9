//! Smoothing tile by tile, for images whose probabilities never exist whole: each tile is
//! smoothed within a window that adds a fixed halo on every side, with the whole image's
//! contrast β, and only its core is kept. The CRF couples every pixel to every other, so
//! this is an approximation; a halo of [`SMOOTH_HALO`] pixels keeps the labels that differ
//! from whole-image smoothing rare (measured in `tests/tiling.rs` and the README).
//!
//! [`TiledSmoother`] takes the rows of an image top to bottom (as a streamed image delivers
//! them) and hands back each band of tiles as soon as the rows below it that its halo needs
//! have arrived, so it holds at most one band plus two halos of rows. Every tile's result
//! depends only on the pixels of its window, so the labels do not depend on how the rows
//! were cut into pushes: the whole-image path and the streamed path agree to the bit.

use rayon::prelude::*;

use crate::features::stack::Rect;
use crate::plane::Plane;
use crate::segmenter::Probabilities;
use crate::smooth::{contrast_beta, smooth, SmoothSettings};
use crate::tiling::{Band, TileGrid};

/// Halo in pixels added around each tile for smoothing. Mean-field without the spatial
/// kernel reaches at most 4 pixels per iteration (one per colour class of its schedule), so
/// with the default 5 iterations 32 pixels cover its reach (the order of updates still depends
/// on the window's parity, so this is not exact by construction); alpha-expansion is global.
/// Measured differences from whole-image smoothing: README, "Huge images".
pub const SMOOTH_HALO: usize = 32;

/// One band of smoothed rows: the band's core rows, the full image width.
#[derive(Clone, Debug)]
pub struct SmoothedRows {
    /// Class index per pixel, row-major.
    pub labels: Vec<u8>,
    /// Mean-field's smoothed probabilities, or the forest's for the other methods.
    pub probabilities: Probabilities,
}

/// Smooths an image pushed a few rows at a time in tiles with a halo (see the module
/// documentation).
pub struct TiledSmoother {
    settings: SmoothSettings,
    beta: f32,
    width: usize,
    n_classes: usize,
    bands: Vec<Band>,
    /// The next band to smooth.
    next: usize,
    /// Image rows `first..first + rows` held: Lab planes (row-major per plane) and the
    /// forest's probabilities (pixel-major).
    first: usize,
    rows: usize,
    lab: Vec<Vec<f32>>,
    probs: Vec<f32>,
}

impl TiledSmoother {
    /// A smoother for an image of `width × height` pixels with `n_classes` classes, in tiles
    /// of `tile` pixels (0 = the whole image as one tile) with `halo` pixels of context;
    /// `beta` is the whole image's contrast β, `settings` are validated.
    pub fn new(
        settings: &SmoothSettings,
        beta: f32,
        (width, height): (usize, usize),
        n_classes: usize,
        tile: usize,
        halo: usize,
    ) -> TiledSmoother {
        TiledSmoother {
            settings: settings.clone(),
            beta,
            width,
            n_classes,
            bands: TileGrid::new(width, height, tile, halo).bands(),
            next: 0,
            first: 0,
            rows: 0,
            lab: Vec::new(),
            probs: Vec::new(),
        }
    }

    /// Adds the next rows of the image (its Lab planes in the model's colour mode, and the
    /// forest's probabilities) and returns the bands, top to bottom, that could be finished.
    pub fn push(&mut self, lab: &[Plane], probs: &Probabilities) -> Vec<SmoothedRows> {
        assert_eq!(probs.width, self.width, "rows of the image's width");
        assert_eq!(probs.n_classes, self.n_classes, "one probability per class");
        if self.lab.is_empty() {
            self.lab = vec![Vec::new(); lab.len()];
        }
        for (held, plane) in self.lab.iter_mut().zip(lab) {
            assert_eq!((plane.width, plane.height), (probs.width, probs.height));
            held.extend_from_slice(&plane.data);
        }
        self.probs.extend_from_slice(&probs.data);
        self.rows += probs.height;
        let mut done = Vec::new();
        while let Some(band) = self.bands.get(self.next) {
            if band.window.y + band.window.height > self.first + self.rows {
                break;
            }
            done.push(self.smooth_band(band));
            self.next += 1;
            // Rows above the next band's window are no longer needed.
            let keep_from = self
                .bands
                .get(self.next)
                .map_or(self.first + self.rows, |b| b.window.y);
            let drop = keep_from.saturating_sub(self.first).min(self.rows);
            let w = self.width;
            for held in &mut self.lab {
                held.drain(..drop * w);
            }
            self.probs.drain(..drop * w * self.n_classes);
            self.first += drop;
            self.rows -= drop;
        }
        done
    }

    /// Smooths the tiles of `band` (in parallel: alpha-expansion's max-flow runs on one
    /// thread) and gathers their cores.
    fn smooth_band(&self, band: &Band) -> SmoothedRows {
        let (w, k) = (self.width, self.n_classes);
        let tiles: Vec<(Vec<u8>, Vec<f32>)> = band
            .tiles
            .par_iter()
            .map(|t| {
                let window = Rect {
                    y: t.window.y - self.first,
                    ..t.window
                };
                let lab: Vec<Plane> = self
                    .lab
                    .iter()
                    .map(|p| crop(p, w, 1, &window))
                    .map(|d| Plane::from_vec(window.width, window.height, d))
                    .collect();
                let probs = Probabilities {
                    width: window.width,
                    height: window.height,
                    n_classes: k,
                    data: crop(&self.probs, w, k, &window),
                };
                let s = smooth(&probs, &lab, &self.settings, Some(self.beta));
                let core = t.core_in_window();
                let p = s.probabilities.unwrap_or(probs);
                (
                    crop(&s.labels, window.width, 1, &core),
                    crop(&p.data, window.width, k, &core),
                )
            })
            .collect();
        let (h, area) = (band.core.height, band.core.area());
        let mut labels = vec![0u8; area];
        let mut data = vec![0.0f32; area * k];
        for (t, (l, p)) in band.tiles.iter().zip(tiles) {
            let cw = t.core.width;
            for y in 0..h {
                let at = y * w + t.core.x;
                labels[at..at + cw].copy_from_slice(&l[y * cw..(y + 1) * cw]);
                data[at * k..(at + cw) * k].copy_from_slice(&p[y * cw * k..(y + 1) * cw * k]);
            }
        }
        SmoothedRows {
            labels,
            probabilities: Probabilities {
                width: w,
                height: h,
                n_classes: k,
                data,
            },
        }
    }
}

/// The values of `r` from a row-major raster `width` pixels wide with `per` values a pixel.
fn crop<T: Copy>(data: &[T], width: usize, per: usize, r: &Rect) -> Vec<T> {
    let mut out = Vec::with_capacity(r.area() * per);
    for y in r.y..r.y + r.height {
        out.extend_from_slice(&data[(y * width + r.x) * per..][..r.width * per]);
    }
    out
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
    let (w, h) = (probs.width, probs.height);
    let mut s = TiledSmoother::new(
        settings,
        contrast_beta(colour),
        (w, h),
        probs.n_classes,
        tile,
        halo,
    );
    s.push(colour, probs)
        .into_iter()
        .flat_map(|b| b.labels)
        .collect()
}

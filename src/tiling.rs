//! Tiled prediction, so memory is bounded by the tile size instead of the image size.
//!
//! The image is cut into square tiles of `tile` pixels (the last row and column of tiles are
//! smaller when `tile` does not divide the image). Each tile's features are computed on a
//! *window*: the tile (its *core*) plus a halo of [`FeatureExtractor::halo`] pixels on every
//! side, clipped to the image. Only the core is predicted and kept. Within the core the
//! features equal the whole image's features exactly:
//!
//! * every filter and histogram output depends on inputs at most `halo` pixels away, so halo
//!   pixels supply the true neighbourhood where the window edge lies inside the image;
//! * where the window edge *is* the image edge the window is not padded, so the filters'
//!   reflection at the window edge is the image's own border reflection (the halo is at least
//!   the reach, so a reflected index never runs past the window's far edge unless the window
//!   spans the whole image along that axis, where it is the image);
//! * position features use whole-image coordinates ([`Placement`]);
//! * every stage computes each pixel with the same arithmetic in the same order wherever it
//!   sits (no position-dependent fast paths, exact integer histograms), so the forest sees
//!   bit-identical rows and the tiled probabilities are bit-identical to the whole image's
//!   (tested below on odd sizes, tiles that do not divide them, grey and RGB, 8 and 16 bit).
//!
//! Tiles are grouped in *bands* (one row of tiles), the unit a streaming reader delivers.

use crate::error::{GroveError, Result};
use crate::eval::drift::FeatureMoments;
use crate::features::stack::FeatureExtractor;
use crate::features::stack::{Placement, Rect};
use crate::imageio::RasterImage;
use crate::segmenter::{Probabilities, Segmenter};

/// Default tile side for `apply` and `eval` (pixels). Measured on a 16-megapixel demo mosaic
/// (4000², the demo's default model, smoothing on, one run per size on the shared 2-core
/// machine at load 8–9): tile 512 took 96.5 CPU s and peaked at 510 MiB, tile 1024 103.7 CPU s
/// and 1109 MiB. By area the halo adds 33 % feature work at 512 and 16 % at 1024 (39-pixel
/// halo), yet 512 was not slower here, so one run each does not separate them; 1024 stays the
/// default because the README's memory table, measured with it, keeps every size up to 256
/// megapixels under 2 GiB (bands are capped at [`BAND_PIXELS`]). 2048 was not measured.
pub const DEFAULT_TILE: usize = 1024;

/// Most core pixels in one band of tiles (8 Mi = 8192 × 1024): wider images get shorter tiles
/// (never below [`MIN_TILE`] rows), which bounds the rows a streamed image holds. Measured
/// (`scripts/memory.sh`, default model, smoothing on): a 16000-pixel-wide image peaked at
/// 2.9 GB with 1024-row bands (16 Mi pixels), above the 2 GiB aim.
pub const BAND_PIXELS: usize = 8 << 20;

/// Tile rows for an image `width` pixels wide and tiles of side `tile` (> 0).
pub fn band_rows(width: usize, tile: usize) -> usize {
    tile.min((BAND_PIXELS / width.max(1)).max(MIN_TILE))
}

/// Smallest accepted tile side: below this the halo dominates the work many times over.
pub const MIN_TILE: usize = 16;

/// Checks a `--tile` value: 0 (whole image) or at least [`MIN_TILE`].
pub fn check_tile(tile: usize) -> Result<()> {
    if tile != 0 && tile < MIN_TILE {
        return Err(GroveError::Config(format!(
            "--tile {tile}: give 0 (the whole image at once) or a tile side of at least {MIN_TILE} pixels"
        )));
    }
    Ok(())
}

/// One tile: the pixels it predicts (`core`) and the pixels its features are computed on
/// (`window` = core + halo, clipped to the image), both in whole-image coordinates.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Tile {
    pub core: Rect,
    pub window: Rect,
}

impl Tile {
    /// The core in the window's own coordinates.
    pub fn core_in_window(&self) -> Rect {
        Rect {
            x: self.core.x - self.window.x,
            y: self.core.y - self.window.y,
            ..self.core
        }
    }
}

/// One row of tiles: `core` and `window` span the image's full width.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Band {
    pub core: Rect,
    pub window: Rect,
    pub tiles: Vec<Tile>,
}

/// How an image of `width × height` is cut into tiles with a halo.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TileGrid {
    pub width: usize,
    pub height: usize,
    /// Tile side in pixels; 0 = one tile covering the whole image.
    pub tile: usize,
    pub halo: usize,
}

/// `[start, start + len)` widened by `halo` on both sides, clipped to `[0, n)`.
fn widen(start: usize, len: usize, halo: usize, n: usize) -> (usize, usize) {
    let lo = start.saturating_sub(halo);
    let hi = (start + len + halo).min(n);
    (lo, hi - lo)
}

impl TileGrid {
    pub fn new(width: usize, height: usize, tile: usize, halo: usize) -> TileGrid {
        TileGrid {
            width,
            height,
            tile,
            halo,
        }
    }

    /// Tile side along x and y (the whole image for `tile == 0`). Tiles are `tile` pixels
    /// wide and at most `tile` tall, but a band (one row of tiles) holds at most
    /// [`BAND_PIXELS`] core pixels: streaming keeps about two bands of rows in memory, so
    /// without this cap memory would grow with the image's width.
    fn sides(&self) -> (usize, usize) {
        if self.tile == 0 {
            (self.width.max(1), self.height.max(1))
        } else {
            (self.tile, band_rows(self.width, self.tile))
        }
    }

    /// The bands, top to bottom, each with its tiles left to right.
    pub fn bands(&self) -> Vec<Band> {
        let (tw, th) = self.sides();
        (0..self.height)
            .step_by(th)
            .map(|y| {
                let h = th.min(self.height - y);
                let (wy, wh) = widen(y, h, self.halo, self.height);
                let tiles = (0..self.width)
                    .step_by(tw)
                    .map(|x| {
                        let w = tw.min(self.width - x);
                        let (wx, ww) = widen(x, w, self.halo, self.width);
                        Tile {
                            core: Rect {
                                x,
                                y,
                                width: w,
                                height: h,
                            },
                            window: Rect {
                                x: wx,
                                y: wy,
                                width: ww,
                                height: wh,
                            },
                        }
                    })
                    .collect();
                Band {
                    core: Rect {
                        x: 0,
                        y,
                        width: self.width,
                        height: h,
                    },
                    window: Rect {
                        x: 0,
                        y: wy,
                        width: self.width,
                        height: wh,
                    },
                    tiles,
                }
            })
            .collect()
    }

    /// The grid for an image and a feature extractor.
    pub fn for_image(width: usize, height: usize, tile: usize, fx: &FeatureExtractor) -> Self {
        TileGrid::new(width, height, tile, fx.halo())
    }
}

/// Predicts every tile of `band`. `pixels` holds the band's window rows (full image width,
/// rows `band.window.y..`); the result holds the band's core rows.
pub fn predict_band(
    seg: &Segmenter,
    pixels: &RasterImage,
    band: &Band,
    image_width: usize,
    image_height: usize,
    mut moments: Option<&mut FeatureMoments>,
) -> Probabilities {
    let k = seg.classes.len();
    let mut out = Probabilities {
        width: band.core.width,
        height: band.core.height,
        n_classes: k,
        data: vec![0.0; band.core.area() * k],
    };
    for tile in &band.tiles {
        let in_band = Rect {
            y: tile.window.y - band.window.y,
            ..tile.window
        };
        let cropped;
        let window = if in_band == Rect::whole(pixels.width, pixels.height) {
            pixels
        } else {
            cropped = pixels.crop(&in_band);
            &cropped
        };
        let at = Placement {
            image_width,
            image_height,
            window: tile.window,
        };
        let p = seg.predict_core(window, &at, &tile.core_in_window(), moments.as_deref_mut());
        let row = tile.core.width * k;
        for (cy, src) in p.data.chunks_exact(row).enumerate() {
            let from = (cy * band.core.width + tile.core.x) * k;
            out.data[from..from + row].copy_from_slice(src);
        }
    }
    out
}

/// Class probabilities of a whole image computed tile by tile (`tile` = 0: in one piece).
/// Bit-identical to [`Segmenter::predict_proba`] for every tile size.
pub fn predict_tiled(seg: &Segmenter, image: &RasterImage, tile: usize) -> Probabilities {
    predict_tiled_with(seg, image, tile, None)
}

/// [`predict_tiled`], also gathering the feature moments of the image (for
/// [`crate::eval::drift`]).
pub fn predict_tiled_moments(
    seg: &Segmenter,
    image: &RasterImage,
    tile: usize,
) -> (Probabilities, FeatureMoments) {
    let mut m = FeatureMoments::new(seg.features.n_features());
    let p = predict_tiled_with(seg, image, tile, Some(&mut m));
    (p, m)
}

fn predict_tiled_with(
    seg: &Segmenter,
    image: &RasterImage,
    tile: usize,
    mut moments: Option<&mut FeatureMoments>,
) -> Probabilities {
    let (w, h) = (image.width, image.height);
    let grid = TileGrid::for_image(w, h, tile, &seg.features);
    let k = seg.classes.len();
    let mut data = Vec::with_capacity(w * h * k);
    for band in grid.bands() {
        let cropped;
        let pixels = if band.window == Rect::whole(w, h) {
            image
        } else {
            cropped = image.crop(&band.window);
            &cropped
        };
        data.extend(predict_band(seg, pixels, &band, w, h, moments.as_deref_mut()).data);
    }
    Probabilities {
        width: w,
        height: h,
        n_classes: k,
        data,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tiles_cover_the_image_once_and_windows_hold_the_halo() {
        for (w, h, t, halo) in [
            (101, 83, 37, 9),
            (64, 64, 16, 40),
            (5, 300, 64, 3),
            (7, 7, 0, 2),
        ] {
            let grid = TileGrid::new(w, h, t, halo);
            let mut seen = vec![0u8; w * h];
            for band in grid.bands() {
                for tile in &band.tiles {
                    let (c, win) = (tile.core, tile.window);
                    for y in c.y..c.y + c.height {
                        for x in c.x..c.x + c.width {
                            seen[y * w + x] += 1;
                        }
                    }
                    assert!(win.x <= c.x && win.y <= c.y);
                    assert_eq!(win.x, c.x.saturating_sub(halo));
                    assert_eq!(win.y, c.y.saturating_sub(halo));
                    assert_eq!(win.x + win.width, (c.x + c.width + halo).min(w));
                    assert_eq!(win.y + win.height, (c.y + c.height + halo).min(h));
                    assert_eq!((win.y, win.height), (band.window.y, band.window.height));
                }
            }
            assert!(seen.iter().all(|&n| n == 1), "{w}x{h} tile {t}");
        }
    }

    #[test]
    fn wide_images_get_shorter_bands() {
        assert_eq!(band_rows(8000, 1024), 1024);
        assert_eq!(band_rows(16000, 1024), BAND_PIXELS / 16000);
        assert_eq!(band_rows(100_000_000, 1024), MIN_TILE);
        let grid = TileGrid::new(16000, 3000, 1024, 40);
        let bands = grid.bands();
        assert_eq!(bands[0].core.height, 524);
        assert!(bands.iter().all(|b| b.core.area() <= BAND_PIXELS));
        assert_eq!(bands[0].tiles[0].core.width, 1024);
    }

    #[test]
    fn tile_size_is_checked() {
        assert!(check_tile(0).is_ok());
        assert!(check_tile(MIN_TILE).is_ok());
        assert!(check_tile(3).unwrap_err().to_string().contains("--tile 3"));
    }
}

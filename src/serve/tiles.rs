//! The image pyramid the page draws from: level 0 is the image as 8-bit RGB, each further
//! level halves it (2 × 2 box mean) until it fits one tile. The page asks only for the tiles
//! it sees at the level that matches its zoom, so a 4000 × 3000 image pans and zooms without
//! the browser ever holding or scaling the full-resolution picture at once.

use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::SystemTime;

use crate::error::Result;
use crate::imageio::{encode_png, read_image};

/// Tile side in pixels.
pub const TILE: usize = 512;
/// Decoded pyramids kept (the image being labelled and the one before).
const KEEP: usize = 2;

pub struct Level {
    pub width: usize,
    pub height: usize,
    pub rgb: Vec<u8>,
}

pub struct Pyramid {
    pub levels: Vec<Level>,
}

impl Pyramid {
    pub fn build(rgb: Vec<u8>, width: usize, height: usize) -> Pyramid {
        let mut levels = vec![Level { width, height, rgb }];
        while let Some(last) = levels.last() {
            if last.width.max(last.height) <= TILE {
                break;
            }
            let next = halve(last);
            levels.push(next);
        }
        Pyramid { levels }
    }

    /// PNG of tile (`x`, `y`) of `level`, or `None` outside the pyramid.
    pub fn tile_png(&self, level: usize, x: usize, y: usize) -> Option<Vec<u8>> {
        let l = self.levels.get(level)?;
        let (x0, y0) = (x.checked_mul(TILE)?, y.checked_mul(TILE)?);
        if x0 >= l.width || y0 >= l.height {
            return None;
        }
        let (w, h) = ((l.width - x0).min(TILE), (l.height - y0).min(TILE));
        let mut buf = Vec::with_capacity(w * h * 3);
        for row in y0..y0 + h {
            let start = (row * l.width + x0) * 3;
            buf.extend_from_slice(&l.rgb[start..start + w * 3]);
        }
        Some(encode_png(w, h, png::ColorType::Rgb, None, &buf))
    }
}

/// Half size (rounded up), each pixel the mean of the up to 2 × 2 pixels it covers.
fn halve(l: &Level) -> Level {
    let (w, h) = (l.width.div_ceil(2), l.height.div_ceil(2));
    let mut rgb = vec![0u8; w * h * 3];
    for y in 0..h {
        for x in 0..w {
            let mut sum = [0u32; 3];
            let mut n = 0;
            for sy in (2 * y)..(2 * y + 2).min(l.height) {
                for sx in (2 * x)..(2 * x + 2).min(l.width) {
                    let p = (sy * l.width + sx) * 3;
                    for (s, &v) in sum.iter_mut().zip(&l.rgb[p..p + 3]) {
                        *s += v as u32;
                    }
                    n += 1;
                }
            }
            let out = &mut rgb[(y * w + x) * 3..(y * w + x) * 3 + 3];
            for (o, s) in out.iter_mut().zip(sum) {
                *o = ((s + n / 2) / n) as u8;
            }
        }
    }
    Level {
        width: w,
        height: h,
        rgb,
    }
}

type Entry = (PathBuf, Option<SystemTime>, Arc<Pyramid>);

/// The last few pyramids built, keyed by file and modification time.
#[derive(Default)]
pub struct PyramidCache {
    entries: Mutex<Vec<Entry>>,
}

impl PyramidCache {
    pub fn get(&self, path: &Path) -> Result<Arc<Pyramid>> {
        let modified = std::fs::metadata(path).and_then(|m| m.modified()).ok();
        {
            let entries = self.entries.lock().expect("tile cache lock poisoned");
            if let Some((_, _, p)) = entries.iter().find(|(p, m, _)| p == path && *m == modified) {
                return Ok(p.clone());
            }
        }
        let image = read_image(path)?;
        let pyramid = Arc::new(Pyramid::build(image.to_rgb8(), image.width, image.height));
        let mut entries = self.entries.lock().expect("tile cache lock poisoned");
        entries.retain(|(p, _, _)| p != path);
        entries.push((path.to_path_buf(), modified, pyramid.clone()));
        while entries.len() > KEEP {
            entries.remove(0);
        }
        Ok(pyramid)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn levels_halve_until_one_tile_and_average() {
        let (w, h) = (1100, 300);
        let rgb: Vec<u8> = (0..w * h * 3).map(|i| (i % 7) as u8 * 30).collect();
        let p = Pyramid::build(rgb, w, h);
        let sizes: Vec<(usize, usize)> = p.levels.iter().map(|l| (l.width, l.height)).collect();
        assert_eq!(sizes, vec![(1100, 300), (550, 150), (275, 75)]);
        let l0 = &p.levels[0];
        let mean = |k: usize| {
            let s: u32 = [0, 1, w, w + 1]
                .iter()
                .map(|&q| l0.rgb[q * 3 + k] as u32)
                .sum();
            ((s + 2) / 4) as u8
        };
        assert_eq!(&p.levels[1].rgb[..3], &[mean(0), mean(1), mean(2)]);
        assert!(p.tile_png(0, 2, 0).is_some());
        assert!(p.tile_png(0, 3, 0).is_none());
        assert!(p.tile_png(5, 0, 0).is_none());
    }
}

//! What to label next: per image, the connected areas where the model is unsure, and a score
//! for ranking images by how much labelling them could settle.
//!
//! Per pixel the model's unsureness `u` ([`unsureness`], 1 − margin) is taken, set to 0 where
//! the pixel is already labelled (known pixels are never suggested). The image score is
//! `Σ u` over its pixels: how many pixels' worth of doubt labelling it could resolve, so a
//! large image with much doubt ranks above a small one with a little. Regions: `u` smoothed
//! by a Gaussian (σ = `smoothing`, so that thin class boundaries, unsure by nature, weigh less
//! than areas of doubt), thresholded at `threshold`, split into 8-connected components
//! (imageproc); components smaller than `min_pixels` are dropped, the rest ranked by `Σ u`
//! over their pixels. The classes in doubt are those with a mean probability ≥ 0.1 over
//! the region (at least the two most probable).

use serde::Serialize;

use crate::error::{GroveError, Result};
use crate::eval::uncertainty::unsureness;
use crate::plane::Plane;
use crate::segmenter::Probabilities;

/// Settings of [`suggest_image`].
#[derive(Clone, Debug)]
pub struct SuggestConfig {
    /// Smoothed unsureness above which a pixel belongs to a region (0–1).
    pub threshold: f32,
    /// Gaussian σ in pixels applied to the unsureness before thresholding (0 = none).
    pub smoothing: f32,
    /// Regions with fewer pixels are dropped.
    pub min_pixels: usize,
    /// Regions kept per image, most unsure first.
    pub max_regions: usize,
}

impl Default for SuggestConfig {
    fn default() -> Self {
        SuggestConfig {
            threshold: 0.5,
            smoothing: 2.0,
            min_pixels: 20,
            max_regions: 5,
        }
    }
}

impl SuggestConfig {
    pub fn validate(&self) -> Result<()> {
        if !(self.threshold > 0.0 && self.threshold < 1.0) {
            return Err(GroveError::Config(format!(
                "threshold {} must be between 0 and 1",
                self.threshold
            )));
        }
        if !(0.0..=50.0).contains(&self.smoothing) {
            return Err(GroveError::Config(format!(
                "smoothing {} must be between 0 and 50 pixels",
                self.smoothing
            )));
        }
        if self.max_regions == 0 {
            return Err(GroveError::Config("at least one region per image".into()));
        }
        Ok(())
    }
}

/// One unsure area: bounding box, size, the classes in doubt, and its pixels.
#[derive(Clone, Debug, Serialize)]
pub struct Region {
    pub x: usize,
    pub y: usize,
    pub width: usize,
    pub height: usize,
    pub pixels: usize,
    /// Class names, most probable first.
    pub classes: Vec<String>,
    /// Σ unsureness over the region's pixels (its rank key).
    #[serde(skip)]
    pub score: f64,
    /// Pixel indices (row-major), most unsure first.
    #[serde(skip)]
    pub members: Vec<u32>,
}

/// The suggestion for one image.
#[derive(Clone, Debug, Serialize)]
pub struct ImageSuggestion {
    pub image: String,
    pub score: f64,
    pub regions: Vec<Region>,
}

/// The JSON of `grove suggest --json`: images best first.
#[derive(Serialize)]
pub struct SuggestReport {
    /// Marks the file as grove's own (see `output_guard`).
    pub generator: String,
    pub images: Vec<ImageSuggestion>,
}

/// Regions and score of one image. `known[p]` marks labelled pixels (never suggested).
pub fn suggest_image(
    name: &str,
    probs: &Probabilities,
    known: Option<&[bool]>,
    class_names: &[String],
    cfg: &SuggestConfig,
) -> ImageSuggestion {
    let (w, h, k) = (probs.width, probs.height, probs.n_classes);
    let mut u = unsureness(probs);
    if let Some(known) = known {
        u.iter_mut().zip(known).for_each(|(v, &kn)| {
            if kn {
                *v = 0.0
            }
        });
    }
    let score: f64 = u.iter().map(|&v| v as f64).sum();
    let smooth = if cfg.smoothing > 0.0 {
        crate::features::gaussian::gaussian(&Plane::from_vec(w, h, u.clone()), cfg.smoothing).data
    } else {
        u.clone()
    };
    let mask = image::GrayImage::from_fn(w as u32, h as u32, |x, y| {
        let p = y as usize * w + x as usize;
        let unknown = known.is_none_or(|kn| !kn[p]);
        image::Luma([u8::from(unknown && smooth[p] >= cfg.threshold)])
    });
    let comps = imageproc::region_labelling::connected_components(
        &mask,
        imageproc::region_labelling::Connectivity::Eight,
        image::Luma([0u8]),
    );
    let n_comp = comps.as_raw().iter().copied().max().unwrap_or(0) as usize;
    let mut members: Vec<Vec<u32>> = vec![Vec::new(); n_comp + 1];
    for (p, &c) in comps.as_raw().iter().enumerate() {
        if c > 0 {
            members[c as usize].push(p as u32);
        }
    }
    let mut regions: Vec<Region> = members
        .into_iter()
        .filter(|m| m.len() >= cfg.min_pixels.max(1))
        .map(|mut m| {
            let (mut x0, mut y0, mut x1, mut y1) = (w, h, 0, 0);
            let mut mean = vec![0f64; k];
            for &p in &m {
                let (x, y) = (p as usize % w, p as usize / w);
                (x0, y0, x1, y1) = (x0.min(x), y0.min(y), x1.max(x), y1.max(y));
                let pr = &probs.data[p as usize * k..(p as usize + 1) * k];
                mean.iter_mut().zip(pr).for_each(|(a, &b)| *a += b as f64);
            }
            let mut order: Vec<usize> = (0..k).collect();
            order.sort_by(|&a, &b| mean[b].total_cmp(&mean[a]));
            let n = m.len() as f64;
            let classes = order
                .iter()
                .enumerate()
                .filter(|&(i, &c)| i < 2 || mean[c] / n >= 0.1)
                .map(|(_, &c)| class_names[c].clone())
                .collect();
            m.sort_by(|&a, &b| u[b as usize].total_cmp(&u[a as usize]).then(a.cmp(&b)));
            Region {
                x: x0,
                y: y0,
                width: x1 - x0 + 1,
                height: y1 - y0 + 1,
                pixels: m.len(),
                classes,
                score: m.iter().map(|&p| u[p as usize] as f64).sum(),
                members: m,
            }
        })
        .collect();
    regions.sort_by(|a, b| {
        b.score
            .total_cmp(&a.score)
            .then(a.y.cmp(&b.y))
            .then(a.x.cmp(&b.x))
    });
    regions.truncate(cfg.max_regions);
    ImageSuggestion {
        image: name.to_string(),
        score,
        regions,
    }
}

/// Sorts suggestions best first (ties by name, so the order is reproducible).
pub fn rank(images: &mut [ImageSuggestion]) {
    images.sort_by(|a, b| b.score.total_cmp(&a.score).then(a.image.cmp(&b.image)));
}

/// The prediction overlay with each region's pixels brightened and its box outlined (white
/// inside black, readable on any colour), numbered by rank with a small built-in digit font.
pub fn draw_regions(overlay_rgb: &mut [u8], width: usize, height: usize, regions: &[Region]) {
    for r in regions {
        for &p in &r.members {
            let px = &mut overlay_rgb[p as usize * 3..p as usize * 3 + 3];
            px.iter_mut()
                .for_each(|v| *v = ((*v as u16 + 255) / 2) as u8);
        }
    }
    let mut img = image::RgbImage::from_raw(width as u32, height as u32, overlay_rgb.to_vec())
        .expect("overlay buffer is width × height × 3");
    use imageproc::drawing::draw_hollow_rect_mut;
    use imageproc::rect::Rect;
    for (i, r) in regions.iter().enumerate() {
        let rect = |grow: i32| {
            Rect::at(r.x as i32 - grow, r.y as i32 - grow).of_size(
                r.width as u32 + 2 * grow as u32,
                r.height as u32 + 2 * grow as u32,
            )
        };
        draw_hollow_rect_mut(&mut img, rect(2), image::Rgb([0, 0, 0]));
        draw_hollow_rect_mut(&mut img, rect(1), image::Rgb([255, 255, 255]));
        draw_hollow_rect_mut(&mut img, rect(0), image::Rgb([0, 0, 0]));
        draw_number(&mut img, i + 1, r.x as i32 - 2, r.y as i32 - 10);
    }
    overlay_rgb.copy_from_slice(img.as_raw());
}

/// 3 × 5 digit glyphs, one row per u8 (bits 2..0 = columns left to right).
const DIGITS: [[u8; 5]; 10] = [
    [7, 5, 5, 5, 7],
    [2, 6, 2, 2, 7],
    [7, 1, 7, 4, 7],
    [7, 1, 3, 1, 7],
    [5, 5, 7, 1, 1],
    [7, 4, 7, 1, 7],
    [7, 4, 7, 5, 7],
    [7, 1, 1, 1, 1],
    [7, 5, 7, 5, 7],
    [7, 5, 7, 1, 7],
];

/// Draws `n` at (x, y) (top left; moved inside the image if needed) at 2× scale, white on a
/// black plate.
fn draw_number(img: &mut image::RgbImage, n: usize, x: i32, y: i32) {
    let text = n.to_string();
    let (gw, gh) = (text.len() as i32 * 8 + 2, 12);
    let x = x.clamp(0, (img.width() as i32 - gw).max(0));
    let y = y.clamp(0, (img.height() as i32 - gh).max(0));
    imageproc::drawing::draw_filled_rect_mut(
        img,
        imageproc::rect::Rect::at(x, y).of_size(gw as u32, gh as u32),
        image::Rgb([0, 0, 0]),
    );
    for (i, ch) in text.bytes().enumerate() {
        let glyph = DIGITS[(ch - b'0') as usize];
        for (row, bits) in glyph.iter().enumerate() {
            for col in 0..3 {
                if bits & (4 >> col) != 0 {
                    for (dx, dy) in [(0, 0), (1, 0), (0, 1), (1, 1)] {
                        let px = x + 2 + i as i32 * 8 + col * 2 + dx;
                        let py = y + 1 + row as i32 * 2 + dy;
                        if px < img.width() as i32 && py < img.height() as i32 {
                            img.put_pixel(px as u32, py as u32, image::Rgb([255, 255, 255]));
                        }
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn probs(w: usize, h: usize, f: impl Fn(usize, usize) -> [f32; 3]) -> Probabilities {
        let mut data = Vec::new();
        for y in 0..h {
            for x in 0..w {
                data.extend(f(x, y));
            }
        }
        Probabilities {
            width: w,
            height: h,
            n_classes: 3,
            data,
        }
    }

    fn names() -> Vec<String> {
        vec!["a".into(), "b".into(), "c".into()]
    }

    #[test]
    fn finds_the_unsure_blocks_and_their_classes() {
        // Sure everywhere except a 10 × 8 block torn between b and c and a 4 × 4 block
        // torn between a and b (less unsure).
        let p = probs(40, 30, |x, y| {
            if (5..15).contains(&x) && (10..18).contains(&y) {
                [0.0, 0.5, 0.5]
            } else if (30..34).contains(&x) && (2..6).contains(&y) {
                [0.4, 0.6, 0.0]
            } else {
                [1.0, 0.0, 0.0]
            }
        });
        let cfg = SuggestConfig {
            smoothing: 0.0,
            min_pixels: 1,
            ..SuggestConfig::default()
        };
        let s = suggest_image("img", &p, None, &names(), &cfg);
        assert_eq!(s.regions.len(), 2);
        let r = &s.regions[0];
        assert_eq!((r.x, r.y, r.width, r.height, r.pixels), (5, 10, 10, 8, 80));
        assert_eq!(r.classes, vec!["b", "c"]);
        assert_eq!(s.regions[1].classes, vec!["b", "a"]);
        assert!((s.score - (80.0 + 16.0 * 0.8)).abs() < 1e-3);
    }

    #[test]
    fn known_pixels_are_never_suggested() {
        let p = probs(20, 20, |_, _| [0.5, 0.5, 0.0]);
        let known: Vec<bool> = (0..400).map(|i| i % 20 < 10).collect();
        let cfg = SuggestConfig::default();
        let s = suggest_image("img", &p, Some(&known), &names(), &cfg);
        assert!((s.score - 200.0).abs() < 1e-3);
        for r in &s.regions {
            assert!(r.x >= 10);
            assert!(r.members.iter().all(|&m| !known[m as usize]));
        }
    }

    #[test]
    fn drawing_stays_inside_the_picture() {
        let p = probs(16, 16, |_, _| [0.5, 0.5, 0.0]);
        let cfg = SuggestConfig {
            smoothing: 0.0,
            ..SuggestConfig::default()
        };
        let s = suggest_image("img", &p, None, &names(), &cfg);
        let mut rgb = vec![0u8; 16 * 16 * 3];
        draw_regions(&mut rgb, 16, 16, &s.regions);
        assert!(rgb.contains(&255));
    }
}

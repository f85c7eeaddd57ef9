//! Renders one demo scene: layout → per-pixel land cover (the labels) → cover textures →
//! camera effects (exposure, colour cast, sun-angle gradient, vignetting, hedge shadows,
//! sensor noise) → 8-bit RGB.
//!
//! The camera effects are there so that a classifier has to generalise across images the
//! way it must on real drone flights, where exposure and white balance change per frame.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::layout::{Cover, FieldKind, Layout};
use super::noise::pixel_gaussian;
use super::texture::{Palette, Rgb};

/// One rendered demo image with its ground truth.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DemoScene {
    pub width: usize,
    pub height: usize,
    /// Interleaved 8-bit sRGB, `rgb[3 * (y * width + x) + c]`.
    pub rgb: Vec<u8>,
    /// Class id per pixel, `labels[y * width + x]`, ids from `demo/classes.toml`.
    pub labels: Vec<u8>,
}

/// Per-image camera and lighting nuisances.
struct Camera {
    exposure: f32,
    cast: Rgb,
    /// Brightness slope per image width along `gradient_dir` (sun-angle falloff).
    gradient: f32,
    gradient_dir: [f32; 2],
    /// Brightness loss at the corners (cos⁴-like falloff approximated by 1 − v·r²).
    vignette: f32,
    noise_sigma: f32,
    noise_seed: u64,
    /// How far (px) canopy casts shadow away from the sun, and how dark it is.
    shadow_len: f32,
    shadow_depth: f32,
}

impl Camera {
    fn generate(rng: &mut ChaCha8Rng) -> Camera {
        let a = rng.gen_range(0.0..std::f32::consts::TAU);
        Camera {
            exposure: rng.gen_range(0.78..1.22),
            cast: [
                rng.gen_range(0.94..1.06),
                rng.gen_range(0.96..1.04),
                rng.gen_range(0.92..1.08),
            ],
            gradient: rng.gen_range(0.0..0.25),
            gradient_dir: [a.cos(), a.sin()],
            vignette: rng.gen_range(0.0..0.25),
            noise_sigma: rng.gen_range(0.008..0.022),
            noise_seed: rng.gen(),
            shadow_len: rng.gen_range(2.0..6.0),
            shadow_depth: rng.gen_range(0.65..0.85),
        }
    }
}

/// Renders scene number `index` of the demo series `seed` at `width`×`height` pixels.
///
/// Deterministic: the layout, colours and camera are drawn from a ChaCha8 generator seeded
/// with `seed` on stream `index` (so scenes of one series are independent), and every
/// per-pixel value is a pure hash of its coordinates, so the bytes do not depend on the
/// number of rayon threads. Sizes of textures are in pixels (one flying height); larger
/// images get more fields. A zero width or height gives an empty scene.
pub fn render_scene(seed: u64, index: u32, width: usize, height: usize) -> DemoScene {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(u64::from(index));
    let layout = Layout::generate(&mut rng, width, height);
    let palette = Palette::generate(&mut rng);
    let camera = Camera::generate(&mut rng);
    let cover = layout.cover();
    let labels: Vec<u8> = cover.iter().map(|c| c.class_id(&layout.fields)).collect();
    let mut rgb = vec![0u8; width * height * 3];
    if width > 0 {
        rgb.par_chunks_mut(width * 3)
            .enumerate()
            .for_each(|(y, row)| render_row(&layout, &palette, &camera, &cover, y, row));
    }
    DemoScene {
        width,
        height,
        rgb,
        labels,
    }
}

fn render_row(
    layout: &Layout,
    palette: &Palette,
    camera: &Camera,
    cover: &[Cover],
    y: usize,
    row: &mut [u8],
) {
    let (w, h) = (layout.width, layout.height);
    let (cx, cy) = (w as f32 / 2.0, h as f32 / 2.0);
    let half_diag2 = (cx * cx + cy * cy).max(1.0);
    let extent = w.max(h) as f32;
    for x in 0..w {
        let p = [x as f32 + 0.5, y as f32 + 0.5];
        let here = cover[y * w + x];
        let mut c = match here {
            Cover::Field(i) => {
                let f = &layout.fields[usize::from(i)];
                match f.kind {
                    FieldKind::Soil => palette.soil(f, p, true),
                    FieldKind::Crop => palette.crop(f, p),
                }
            }
            Cover::Track(d) => palette.track(p, d, layout.track_half_width),
            Cover::Water => palette.water(p),
            Cover::Canopy => palette.canopy(p),
        };
        // Canopy casts a shadow on the ground on the side away from the sun.
        if matches!(here, Cover::Field(_) | Cover::Track(_)) {
            let sx = (p[0] + palette.sun[0] * camera.shadow_len).floor();
            let sy = (p[1] + palette.sun[1] * camera.shadow_len).floor();
            if sx >= 0.0 && sy >= 0.0 && (sx as usize) < w && (sy as usize) < h {
                if let Cover::Canopy = cover[sy as usize * w + sx as usize] {
                    c = [
                        c[0] * camera.shadow_depth,
                        c[1] * camera.shadow_depth,
                        c[2] * camera.shadow_depth,
                    ];
                }
            }
        }
        let (dx, dy) = (p[0] - cx, p[1] - cy);
        let light = camera.exposure
            * (1.0
                + camera.gradient * (dx * camera.gradient_dir[0] + dy * camera.gradient_dir[1])
                    / extent)
            * (1.0 - camera.vignette * (dx * dx + dy * dy) / half_diag2);
        for k in 0..3 {
            let n = camera.noise_sigma
                * pixel_gaussian(camera.noise_seed.wrapping_add(k as u64), x as i32, y as i32);
            let v = c[k] * light * camera.cast[k] + n;
            row[3 * x + k] = (v.clamp(0.0, 1.0) * 255.0).round() as u8;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::super::{CANOPY, CROP, N_CLASSES, SOIL, TRACK, WATER};
    use super::*;

    #[test]
    fn same_seed_and_index_give_identical_bytes() {
        let a = render_scene(42, 3, 96, 80);
        let b = render_scene(42, 3, 96, 80);
        assert_eq!(a, b);
        let c = render_scene(42, 4, 96, 80);
        assert_ne!(a.rgb, c.rgb, "another index must give another scene");
        let d = render_scene(43, 3, 96, 80);
        assert_ne!(a.rgb, d.rgb, "another seed must give another scene");
    }

    #[test]
    fn rendering_does_not_depend_on_thread_count() {
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let a = one.install(|| render_scene(7, 1, 64, 48));
        let b = render_scene(7, 1, 64, 48);
        assert_eq!(a, b);
    }

    #[test]
    fn every_class_appears_and_ids_are_in_the_table() {
        // The class table is the committed TOML; parse the ids out of it so the test checks
        // the generator against the file users see, not against the constants alone.
        let table: Vec<u8> = super::super::DEMO_CLASSES_TOML
            .lines()
            .filter_map(|l| l.trim().strip_prefix("id ="))
            .map(|v| v.split('#').next().unwrap().trim().parse().unwrap())
            .collect();
        assert_eq!(table, vec![SOIL, CROP, WATER, TRACK, CANOPY]);
        assert_eq!(table.len(), N_CLASSES);
        let mut seen = [0usize; 256];
        for i in 0..20 {
            let s = render_scene(2024, i, 128, 128);
            assert_eq!(s.labels.len(), 128 * 128);
            assert_eq!(s.rgb.len(), 128 * 128 * 3);
            for &l in &s.labels {
                seen[usize::from(l)] += 1;
            }
        }
        for (id, &n) in seen.iter().enumerate() {
            assert_eq!(n > 0, table.contains(&(id as u8)), "class {id}: {n} pixels");
        }
    }

    #[test]
    fn degenerate_sizes_do_not_panic() {
        for (w, h) in [(0, 0), (0, 5), (5, 0), (1, 1), (3, 200)] {
            let s = render_scene(1, 0, w, h);
            assert_eq!(s.labels.len(), w * h);
            assert_eq!(s.rgb.len(), w * h * 3);
        }
    }
}

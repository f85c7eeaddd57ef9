//! The look of each land cover: colour and texture of soil, crop rows, canopy, gravel and
//! water at one pixel, before any camera effects.
//!
//! The pairs that share a colour are told apart by texture scale on purpose: crop rows
//! (regular, row period 6–10 px, fine leaves) vs canopy (round crowns ~10 px with dark
//! shadows between them); soil (furrows and ~50 px mottling, smooth at 1 px) vs track
//! (1–2 px gravel speckle with bright stones). Colours are linear factors in `[0, 1]`.

use std::f32::consts::TAU;

use rand::Rng;
use rand_chacha::ChaCha8Rng;

use super::layout::Field;
use super::noise::{fbm, lattice_unit, value_noise};

pub(crate) type Rgb = [f32; 3];

fn scale(c: Rgb, k: f32) -> Rgb {
    [c[0] * k, c[1] * k, c[2] * k]
}

fn mix(a: Rgb, b: Rgb, t: f32) -> Rgb {
    [
        a[0] + (b[0] - a[0]) * t,
        a[1] + (b[1] - a[1]) * t,
        a[2] + (b[2] - a[2]) * t,
    ]
}

fn jitter(rng: &mut ChaCha8Rng, c: Rgb, amount: f32) -> Rgb {
    let k = rng.gen_range(1.0 - amount..1.0 + amount);
    [
        c[0] * k * rng.gen_range(0.96..1.04),
        c[1] * k * rng.gen_range(0.96..1.04),
        c[2] * k * rng.gen_range(0.96..1.04),
    ]
}

/// Per-scene colours, noise seeds and sun direction.
#[derive(Clone, Debug)]
pub(crate) struct Palette {
    seeds: [u64; 10],
    /// Unit vector in the image plane pointing towards the sun.
    pub sun: [f32; 2],
    sun_elevation: f32,
    soil: Rgb,
    gravel: Rgb,
    crop: Rgb,
    canopy: Rgb,
    water: Rgb,
    sky: Rgb,
    ripple_dir: [f32; 2],
}

impl Palette {
    /// Draws this scene's colours. The gravel colour is the soil colour pulled a third of
    /// the way to its grey, so colour alone barely separates soil from track.
    pub fn generate(rng: &mut ChaCha8Rng) -> Palette {
        let mut seeds = [0u64; 10];
        seeds.iter_mut().for_each(|s| *s = rng.gen());
        let az = rng.gen_range(0.0..TAU);
        let soil = jitter(rng, [0.50, 0.40, 0.30], 0.1);
        let grey = (soil[0] + soil[1] + soil[2]) / 3.0;
        let gravel = scale(mix(soil, [grey; 3], 0.3), rng.gen_range(0.95..1.08));
        let ra = rng.gen_range(0.0..TAU);
        Palette {
            seeds,
            sun: [az.cos(), az.sin()],
            sun_elevation: rng.gen_range(0.5..1.1),
            soil,
            gravel,
            crop: jitter(rng, [0.22, 0.40, 0.12], 0.1),
            canopy: jitter(rng, [0.21, 0.38, 0.12], 0.1),
            water: jitter(rng, [0.07, 0.11, 0.13], 0.2),
            sky: jitter(rng, [0.40, 0.46, 0.52], 0.1),
            ripple_dir: [ra.cos(), ra.sin()],
        }
    }

    /// Tilled soil: low-frequency mottling (~45 px), clods (~2.5 px) and, in bare fields,
    /// furrows across `field.across` with the field's period.
    pub fn soil(&self, field: &Field, p: [f32; 2], furrows: bool) -> Rgb {
        let s = &self.seeds;
        let mottle = fbm(s[0], p[0], p[1], 45.0, 3);
        let clod = value_noise(s[1], p[0] / 2.5, p[1] / 2.5);
        let mut b = field.tone * (0.84 + 0.32 * mottle) * (0.94 + 0.12 * clod);
        if furrows {
            let u = (p[0] * field.across[0] + p[1] * field.across[1]) / field.period;
            b *= 1.0 + 0.08 * (TAU * u).sin();
        }
        let redness = 0.96 + 0.08 * fbm(s[2], p[0], p[1], 60.0, 2);
        let c = scale(self.soil, b);
        [c[0] * redness, c[1], c[2] / redness]
    }

    /// Crop rows: plants centred on rows spaced `field.period` apart, each row covering
    /// `field.coverage` of the spacing with a leafy (~1.4 px) ragged edge; soil between.
    pub fn crop(&self, field: &Field, p: [f32; 2]) -> Rgb {
        let s = &self.seeds;
        let u = (p[0] * field.across[0] + p[1] * field.across[1]) / field.period;
        // 0 at the row centre, 1 midway between rows.
        let d = ((u - u.floor()) - 0.5).abs() * 2.0;
        let leaf = value_noise(s[3], p[0] / 1.4, p[1] / 1.4);
        let clump = value_noise(s[4], p[0] / 3.0, p[1] / 3.0);
        let edge = field.coverage * (0.7 + 0.6 * clump);
        if d < edge {
            scale(
                self.crop,
                (0.72 + 0.5 * leaf) * (1.0 - 0.3 * d / edge.max(1e-3)),
            )
        } else {
            // Soil between rows, a little shaded next to the plants.
            let shade = 0.8 + 0.2 * ((d - edge) / (1.0 - edge).max(1e-3)).min(1.0);
            scale(self.soil(field, p, false), shade)
        }
    }

    /// Tree canopy: overlapping round crowns (one per ~10 px cell, jittered, radius 5–9 px)
    /// shaded as hemispheres lit by the sun, with deep shadow where no crown covers.
    pub fn canopy(&self, p: [f32; 2]) -> Rgb {
        let s = &self.seeds;
        const CELL: f32 = 10.0;
        let (gx, gy) = ((p[0] / CELL).floor() as i32, (p[1] / CELL).floor() as i32);
        let (mut best_z, mut best_shade, mut best_tint) = (-1.0f32, 0.0f32, 1.0f32);
        let (ce, se) = (self.sun_elevation.cos(), self.sun_elevation.sin());
        for cy in gy - 1..=gy + 1 {
            for cx in gx - 1..=gx + 1 {
                let jx = lattice_unit(s[5], cx, cy);
                let jy = lattice_unit(s[6], cx, cy);
                let hr = lattice_unit(s[7], cx, cy);
                let r = CELL * (0.5 + 0.4 * hr);
                let centre = [(cx as f32 + jx) * CELL, (cy as f32 + jy) * CELL];
                let (dx, dy) = ((p[0] - centre[0]) / r, (p[1] - centre[1]) / r);
                let q = dx * dx + dy * dy;
                if q < 1.0 {
                    let z = (1.0 - q).sqrt();
                    // Taller (larger) crowns win where crowns overlap.
                    let top = z * r;
                    if top > best_z {
                        best_z = top;
                        let lambert = dx * self.sun[0] * ce + dy * self.sun[1] * ce + z * se;
                        best_shade = lambert.max(0.0);
                        best_tint = 0.85 + 0.3 * lattice_unit(s[8], cx, cy);
                    }
                }
            }
        }
        let leaf = value_noise(s[9], p[0] / 1.5, p[1] / 1.5);
        if best_z < 0.0 {
            scale(self.canopy, 0.25 + 0.1 * leaf)
        } else {
            let c = scale(
                self.canopy,
                (0.3 + 0.85 * best_shade) * (0.88 + 0.24 * leaf),
            );
            [c[0] * best_tint, c[1], c[2]]
        }
    }

    /// Gravel track: per-pixel grain, ~1.8 px speckle, bright stones on ~7 % of pixels, and
    /// two darker wheel ruts at half the half-width from the centre line.
    pub fn track(&self, p: [f32; 2], dist: f32, half_width: f32) -> Rgb {
        let s = &self.seeds;
        let (ix, iy) = (p[0].floor() as i32, p[1].floor() as i32);
        let grain = lattice_unit(s[0] ^ 0x7F, ix, iy);
        let speck = value_noise(s[1] ^ 0x7F, p[0] / 1.8, p[1] / 1.8);
        let mottle = fbm(s[0], p[0], p[1], 45.0, 2);
        let mut b = (0.82 + 0.2 * grain) * (0.9 + 0.2 * speck) * (0.92 + 0.16 * mottle);
        if (dist - 0.5 * half_width).abs() < 1.6 {
            b *= 0.88;
        }
        let mut c = scale(self.gravel, b);
        if lattice_unit(s[2] ^ 0x7F, ix, iy) > 0.93 {
            c = mix(c, [0.85, 0.83, 0.78], 0.45);
        }
        c
    }

    /// Standing water: dark, with a patchy sky reflection (~70 px) and faint ripples.
    pub fn water(&self, p: [f32; 2]) -> Rgb {
        let s = &self.seeds;
        let refl = fbm(s[3] ^ 0x3A, p[0], p[1], 70.0, 3);
        let phase = (p[0] * self.ripple_dir[0] + p[1] * self.ripple_dir[1]) / 3.0
            + 6.0 * fbm(s[4] ^ 0x3A, p[0], p[1], 25.0, 2);
        let c = mix(self.water, self.sky, 0.45 * refl * refl);
        scale(c, 1.0 + 0.05 * phase.sin())
    }
}

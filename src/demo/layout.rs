//! The geometry of one demo farm: fields as Voronoi cells, hedgerows on some field borders,
//! a few free-standing trees, a curved track and a pond; and the per-pixel land cover that
//! follows from it (which also defines the ground-truth label of every pixel).
//!
//! Voronoi cells are convex polygons with straight borders, which is what fields seen from
//! a drone mostly look like; the border between the two nearest sites is where a hedge
//! can grow.

use rand::Rng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

use super::noise::fbm;
use super::{CANOPY, CROP, SOIL, TRACK, WATER};

/// What a field is planted with.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) enum FieldKind {
    /// Bare tilled soil with furrows.
    Soil,
    /// Crop rows on soil.
    Crop,
}

/// One field (Voronoi cell) and the parameters of its texture.
#[derive(Clone, Debug)]
pub(crate) struct Field {
    pub site: [f32; 2],
    pub kind: FieldKind,
    /// Unit vector across the rows / furrows (rows run perpendicular to it).
    pub across: [f32; 2],
    /// Row or furrow spacing in pixels.
    pub period: f32,
    /// Fraction of the row spacing covered by plants (crop only).
    pub coverage: f32,
    /// Brightness factor of this field's soil (moisture, soil type).
    pub tone: f32,
}

/// A free-standing tree or clump of trees.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Tree {
    pub centre: [f32; 2],
    pub radius: f32,
}

/// Everything random about one scene's geometry, drawn once from the scene's RNG.
#[derive(Clone, Debug)]
pub(crate) struct Layout {
    pub width: usize,
    pub height: usize,
    pub fields: Vec<Field>,
    /// `hedge[i * n + j]`: a hedgerow grows on the border of fields i and j.
    pub hedge: Vec<bool>,
    pub hedge_half_width: f32,
    pub trees: Vec<Tree>,
    /// The track's centre line as a polyline.
    pub track: Vec<[f32; 2]>,
    pub track_half_width: f32,
    pub pond_centre: [f32; 2],
    pub pond_radius: f32,
    /// Seed for the noise that roughens hedge, tree and pond outlines.
    pub outline_seed: u64,
}

/// Land cover of one pixel: its class plus what the texture needs to know.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) enum Cover {
    Field(u16),
    /// Distance from the track's centre line in pixels.
    Track(f32),
    Water,
    Canopy,
}

impl Cover {
    /// The ground-truth class id of this cover.
    pub fn class_id(self, fields: &[Field]) -> u8 {
        match self {
            Cover::Field(i) => match fields[usize::from(i)].kind {
                FieldKind::Soil => SOIL,
                FieldKind::Crop => CROP,
            },
            Cover::Track(_) => TRACK,
            Cover::Water => WATER,
            Cover::Canopy => CANOPY,
        }
    }
}

fn dist2(a: [f32; 2], b: [f32; 2]) -> f32 {
    (a[0] - b[0]).powi(2) + (a[1] - b[1]).powi(2)
}

/// Distance from `p` to the segment `a`–`b` (clamped projection).
fn segment_distance(p: [f32; 2], a: [f32; 2], b: [f32; 2]) -> f32 {
    let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
    let len2 = dx * dx + dy * dy;
    let t = if len2 > 0.0 {
        (((p[0] - a[0]) * dx + (p[1] - a[1]) * dy) / len2).clamp(0.0, 1.0)
    } else {
        0.0
    };
    dist2(p, [a[0] + t * dx, a[1] + t * dy]).sqrt()
}

/// A point on the border of a `w`×`h` rectangle, `side` 0..4 = top, right, bottom, left,
/// at fraction `t` along it.
fn border_point(side: u32, t: f32, w: f32, h: f32) -> [f32; 2] {
    match side % 4 {
        0 => [t * w, -5.0],
        1 => [w + 5.0, t * h],
        2 => [t * w, h + 5.0],
        _ => [-5.0, t * h],
    }
}

impl Layout {
    /// Draws a layout for a `width`×`height` scene. Pixel-scale parameters (row spacing,
    /// track width, pond size) are fixed in pixels, as for a drone flying at one height;
    /// the number of fields grows with the image area.
    pub fn generate(rng: &mut ChaCha8Rng, width: usize, height: usize) -> Layout {
        // Degenerate sizes are sampled as 1 px so that every range below stays non-empty.
        let (w, h) = (width.max(1) as f32, height.max(1) as f32);
        let area_ratio = (w * h) / (384.0 * 384.0);
        let n_fields = ((rng.gen_range(5.0..9.0f32) * area_ratio).round() as usize).clamp(2, 400);
        // Sites with a minimum spacing (dart throwing with a bounded number of tries), so
        // fields are not slivers.
        let min_gap = 0.45 * (w * h / n_fields as f32).sqrt();
        let mut fields: Vec<Field> = Vec::with_capacity(n_fields);
        let mut tries = 0;
        while fields.len() < n_fields && tries < 2000 {
            tries += 1;
            let site = [rng.gen_range(0.0..w), rng.gen_range(0.0..h)];
            if tries < 1500
                && fields
                    .iter()
                    .any(|f| dist2(f.site, site) < min_gap * min_gap)
            {
                continue;
            }
            let kind = if rng.gen_bool(0.55) {
                FieldKind::Crop
            } else {
                FieldKind::Soil
            };
            let angle = rng.gen_range(0.0..std::f32::consts::PI);
            let period = match kind {
                FieldKind::Crop => rng.gen_range(6.0..10.0),
                FieldKind::Soil => rng.gen_range(7.0..13.0),
            };
            fields.push(Field {
                site,
                kind,
                across: [angle.cos(), angle.sin()],
                period,
                coverage: rng.gen_range(0.45..0.9),
                tone: rng.gen_range(0.82..1.15),
            });
        }
        if fields.is_empty() {
            fields.push(Field {
                site: [w / 2.0, h / 2.0],
                kind: FieldKind::Soil,
                across: [1.0, 0.0],
                period: 9.0,
                coverage: 0.6,
                tone: 1.0,
            });
        }
        let n = fields.len();
        let mut hedge = vec![false; n * n];
        for i in 0..n {
            for j in i + 1..n {
                let grow = rng.gen_bool(0.4);
                hedge[i * n + j] = grow;
                hedge[j * n + i] = grow;
            }
        }
        let hedge_half_width = rng.gen_range(5.5..10.0);
        let n_trees = ((rng.gen_range(1.0..5.0f32) * area_ratio).round() as usize).min(200);
        let trees = (0..n_trees)
            .map(|_| Tree {
                centre: [rng.gen_range(0.0..w), rng.gen_range(0.0..h)],
                radius: rng.gen_range(8.0..18.0),
            })
            .collect();

        // Track: a cubic Bézier from one border to another, sampled as a polyline.
        let side_a = rng.gen_range(0..4u32);
        let side_b = side_a + rng.gen_range(1..4u32);
        let p0 = border_point(side_a, rng.gen_range(0.15..0.85), w, h);
        let p3 = border_point(side_b, rng.gen_range(0.15..0.85), w, h);
        let mut ctrl = || {
            [
                rng.gen_range(0.1 * w..0.9 * w),
                rng.gen_range(0.1 * h..0.9 * h),
            ]
        };
        let (p1, p2) = (ctrl(), ctrl());
        let track: Vec<[f32; 2]> = (0..=48)
            .map(|k| {
                let t = k as f32 / 48.0;
                let u = 1.0 - t;
                let b = [u * u * u, 3.0 * u * u * t, 3.0 * u * t * t, t * t * t];
                [
                    b[0] * p0[0] + b[1] * p1[0] + b[2] * p2[0] + b[3] * p3[0],
                    b[0] * p0[1] + b[1] * p1[1] + b[2] * p2[1] + b[3] * p3[1],
                ]
            })
            .collect();
        let track_half_width = rng.gen_range(6.0..12.5);

        // Pond: keep it clear of the track when a place can be found within a few tries.
        let pond_radius = rng.gen_range(18.0..42.0f32);
        let mut pond_centre = [w / 2.0, h / 2.0];
        for _ in 0..30 {
            pond_centre = [rng.gen_range(0.0..w), rng.gen_range(0.0..h)];
            let clear = track
                .windows(2)
                .map(|s| segment_distance(pond_centre, s[0], s[1]))
                .fold(f32::INFINITY, f32::min);
            if clear > 1.3 * pond_radius + track_half_width + 4.0 {
                break;
            }
        }
        Layout {
            width,
            height,
            fields,
            hedge,
            hedge_half_width,
            trees,
            track,
            track_half_width,
            pond_centre,
            pond_radius,
            outline_seed: rng.gen(),
        }
    }

    /// Distance to the track centre line for every pixel within reach of the track
    /// (`f32::INFINITY` elsewhere). Each segment is stamped over its bounding box only,
    /// which is far cheaper than testing every segment at every pixel.
    fn track_distance(&self) -> Vec<f32> {
        let (w, h) = (self.width, self.height);
        let mut dist = vec![f32::INFINITY; w * h];
        let reach = self.track_half_width + 1.0;
        for s in self.track.windows(2) {
            let (a, b) = (s[0], s[1]);
            let x0 = (a[0].min(b[0]) - reach).floor().max(0.0) as usize;
            let x1 = ((a[0].max(b[0]) + reach).ceil().max(0.0) as usize).min(w);
            let y0 = (a[1].min(b[1]) - reach).floor().max(0.0) as usize;
            let y1 = ((a[1].max(b[1]) + reach).ceil().max(0.0) as usize).min(h);
            for y in y0..y1 {
                for x in x0..x1 {
                    let d = segment_distance([x as f32 + 0.5, y as f32 + 0.5], a, b);
                    let slot = &mut dist[y * w + x];
                    if d < *slot {
                        *slot = d;
                    }
                }
            }
        }
        dist
    }

    /// Land cover of every pixel (row-major), by precedence water > track > canopy > field.
    /// A pixel is tested at its centre `(x + 0.5, y + 0.5)`.
    pub fn cover(&self) -> Vec<Cover> {
        let (w, h) = (self.width, self.height);
        let track = self.track_distance();
        let mut cover = vec![Cover::Water; w * h];
        if w == 0 {
            return cover;
        }
        cover.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
            for (x, c) in row.iter_mut().enumerate() {
                *c = self.cover_at([x as f32 + 0.5, y as f32 + 0.5], track[y * w + x]);
            }
        });
        cover
    }

    fn cover_at(&self, p: [f32; 2], track_dist: f32) -> Cover {
        let seed = self.outline_seed;
        // Pond: a disc whose radius wobbles with low-frequency noise.
        // (The noisy radius is only evaluated where it can matter: it lies in [0.8, 1.25]·r.)
        let dp = dist2(p, self.pond_centre);
        if dp < (1.25 * self.pond_radius).powi(2) {
            let pr = self.pond_radius * (0.8 + 0.45 * fbm(seed ^ 1, p[0], p[1], 22.0, 3));
            if dp < pr * pr {
                return Cover::Water;
            }
        }
        if track_dist <= self.track_half_width {
            return Cover::Track(track_dist);
        }
        // Two nearest field sites.
        let (mut i1, mut d1, mut i2, mut d2) = (0usize, f32::INFINITY, 0usize, f32::INFINITY);
        for (i, f) in self.fields.iter().enumerate() {
            let d = dist2(p, f.site);
            if d < d1 {
                (i2, d2) = (i1, d1);
                (i1, d1) = (i, d);
            } else if d < d2 {
                (i2, d2) = (i, d);
            }
        }
        let n = self.fields.len();
        if d2.is_finite() && self.hedge[i1 * n + i2] {
            // Distance to the bisector of the two sites: (d2² − d1²) / (2 |s1 − s2|).
            let gap = dist2(self.fields[i1].site, self.fields[i2].site).sqrt();
            let e = (d2 - d1) / (2.0 * gap.max(1e-3));
            if e < 1.45 * self.hedge_half_width {
                let hw = self.hedge_half_width * (0.55 + 0.9 * fbm(seed ^ 2, p[0], p[1], 9.0, 2));
                if e < hw {
                    return Cover::Canopy;
                }
            }
        }
        for t in &self.trees {
            let dt = dist2(p, t.centre);
            if dt < (1.25 * t.radius).powi(2) {
                let r = t.radius * (0.75 + 0.5 * fbm(seed ^ 3, p[0], p[1], 6.0, 2));
                if dt < r * r {
                    return Cover::Canopy;
                }
            }
        }
        Cover::Field(i1 as u16)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn stamped_track_distance_matches_brute_force() {
        // Slow reference: distance to every segment at every pixel. The stamped version
        // must agree exactly wherever the pixel is on the track (same f32 arithmetic).
        for stream in 0..4 {
            let mut rng = ChaCha8Rng::seed_from_u64(11);
            rng.set_stream(stream);
            let layout = Layout::generate(&mut rng, 90, 70);
            let fast = layout.track_distance();
            for y in 0..70 {
                for x in 0..90 {
                    let p = [x as f32 + 0.5, y as f32 + 0.5];
                    let slow = layout
                        .track
                        .windows(2)
                        .map(|s| segment_distance(p, s[0], s[1]))
                        .fold(f32::INFINITY, f32::min);
                    let f = fast[y * 90 + x];
                    if slow <= layout.track_half_width || f <= layout.track_half_width {
                        assert_eq!(f, slow, "pixel ({x}, {y})");
                    }
                }
            }
        }
    }

    #[test]
    fn bisector_distance_identity() {
        // (|p−s2|² − |p−s1|²) / (2|s1−s2|) equals the signed distance from p to the
        // perpendicular bisector of s1 s2 (expand the squares; the |p|² terms cancel).
        // Checked against projecting p onto the bisector normal; 1e-3 px is f32 rounding
        // of squared distances ~1e4.
        let (s1, s2) = ([10.0f32, 20.0], [70.0f32, 45.0]);
        let gap = dist2(s1, s2).sqrt();
        let n = [(s2[0] - s1[0]) / gap, (s2[1] - s1[1]) / gap];
        let mid = [(s1[0] + s2[0]) / 2.0, (s1[1] + s2[1]) / 2.0];
        for &p in &[[0.0f32, 0.0], [40.0, 30.0], [55.5, -3.25], [100.0, 80.0]] {
            let e = (dist2(p, s2) - dist2(p, s1)) / (2.0 * gap);
            let proj = -((p[0] - mid[0]) * n[0] + (p[1] - mid[1]) * n[1]);
            assert!((e - proj).abs() < 1e-3, "{e} vs {proj}");
        }
    }
}

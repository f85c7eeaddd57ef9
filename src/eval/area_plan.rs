//! Where to look: a stratified random sample of pixel locations over the maps, for the user
//! to label with their true classes, so that `grove areas --reference` can correct the
//! mapped areas (Olofsson et al. 2014, "Good practices for estimating area and assessing
//! accuracy of land change", Remote Sensing of Environment 148:42–57, section 5.1.2: the map
//! classes are the strata; rare classes get a minimum sample so that their user's accuracy
//! is estimated at all, the rest is allocated in proportion to mapped area).

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::Serialize;

/// Most samples any one class gets as its minimum (the paper's examples use 50–100 per
/// class for the rare ones; 50 is the lower of them).
pub const MIN_PER_CLASS: usize = 50;

/// One sampled pixel.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct SamplePoint {
    /// Index of the map in the caller's list.
    pub map: usize,
    pub x: usize,
    pub y: usize,
    /// Class index the map gives this pixel (its stratum).
    pub class: usize,
}

/// Samples per class for `n` samples in all, over `pixels` mapped pixels per class: every
/// class that is mapped gets min(`MIN_PER_CLASS`, n / (2 × classes present), its pixels),
/// the rest goes in proportion to mapped area (largest remainders), never more than a class
/// has pixels.
pub fn allocate(n: usize, pixels: &[u64]) -> Vec<usize> {
    let present: Vec<usize> = (0..pixels.len()).filter(|&c| pixels[c] > 0).collect();
    let mut out = vec![0usize; pixels.len()];
    if present.is_empty() {
        return out;
    }
    let available: u64 = pixels.iter().sum();
    let n = n.min(available.min(usize::MAX as u64) as usize);
    let floor = MIN_PER_CLASS.min(n / (2 * present.len())).max(1);
    for &c in &present {
        out[c] = floor.min(pixels[c] as usize);
    }
    let mut left = n.saturating_sub(out.iter().sum());
    // Proportional shares of what is left, by largest remainder, capped by the pixels.
    while left > 0 {
        let room: Vec<usize> = present
            .iter()
            .copied()
            .filter(|&c| (out[c] as u64) < pixels[c])
            .collect();
        if room.is_empty() {
            break;
        }
        let total: u64 = room.iter().map(|&c| pixels[c]).sum();
        let shares: Vec<(usize, f64)> = room
            .iter()
            .map(|&c| (c, left as f64 * pixels[c] as f64 / total as f64))
            .collect();
        let mut given = 0;
        for &(c, s) in &shares {
            let add = (s.floor() as usize).min((pixels[c] - out[c] as u64) as usize);
            out[c] += add;
            given += add;
        }
        if given == 0 {
            // Fewer samples left than classes with room: one each to the largest fractions.
            let mut by_rest = shares;
            by_rest.sort_by(|a, b| (b.1 - b.1.floor()).total_cmp(&(a.1 - a.1.floor())));
            for &(c, _) in by_rest.iter().take(left) {
                out[c] += 1;
                given += 1;
            }
        }
        left -= given;
    }
    out
}

/// Draws the allocation `per_class` from maps of class indices (`maps[i]` is row-major with
/// width `widths[i]`): within each class a simple random sample without replacement of its
/// pixels over all maps. The same seed gives the same points. Points come sorted by map,
/// then row, then column.
pub fn draw(maps: &[&[u8]], widths: &[usize], per_class: &[usize], seed: u64) -> Vec<SamplePoint> {
    let k = per_class.len();
    let mut counts = vec![0u64; k];
    for m in maps {
        for &c in m.iter() {
            if (c as usize) < k {
                counts[c as usize] += 1;
            }
        }
    }
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    // For each class, the sorted ranks (0.. its pixel count) of the chosen pixels.
    let chosen: Vec<Vec<u64>> = (0..k)
        .map(|c| {
            let n = per_class[c].min(counts[c] as usize);
            let mut r: Vec<u64> = rand::seq::index::sample(&mut rng, counts[c] as usize, n)
                .into_iter()
                .map(|i| i as u64)
                .collect();
            r.sort_unstable();
            r
        })
        .collect();
    let mut next = vec![0usize; k];
    let mut rank = vec![0u64; k];
    let mut points = Vec::new();
    for (i, m) in maps.iter().enumerate() {
        for (p, &c) in m.iter().enumerate() {
            let c = c as usize;
            if c >= k {
                continue;
            }
            if chosen[c].get(next[c]) == Some(&rank[c]) {
                points.push(SamplePoint {
                    map: i,
                    x: p % widths[i],
                    y: p / widths[i],
                    class: c,
                });
                next[c] += 1;
            }
            rank[c] += 1;
        }
    }
    points
}

/// A picture of a map with `points` ringed (black and white, readable on any colour): the
/// apply overlay at `overlay` if it is there and the map's size, else the class colours.
pub fn mark_points(
    overlay: &std::path::Path,
    map: &crate::dataset::labels::LabelMap,
    classes: &crate::dataset::ClassTable,
    points: &[&SamplePoint],
) -> Vec<u8> {
    let (w, h) = (map.width as u32, map.height as u32);
    let background = image::open(overlay)
        .ok()
        .map(|i| i.to_rgb8())
        .filter(|i| i.dimensions() == (w, h));
    let mut img = background.unwrap_or_else(|| {
        let colours: Vec<[u8; 3]> = classes.classes().iter().map(|c| c.color).collect();
        image::RgbImage::from_fn(w, h, |x, y| {
            let c = map.indices[(y * w + x) as usize] as usize;
            image::Rgb(colours.get(c).copied().unwrap_or([0, 0, 0]))
        })
    });
    use imageproc::drawing::draw_hollow_circle_mut;
    for p in points {
        let at = (p.x as i32, p.y as i32);
        draw_hollow_circle_mut(&mut img, at, 6, image::Rgb([0, 0, 0]));
        draw_hollow_circle_mut(&mut img, at, 5, image::Rgb([255, 255, 255]));
        draw_hollow_circle_mut(&mut img, at, 4, image::Rgb([0, 0, 0]));
        img.put_pixel(p.x as u32, p.y as u32, image::Rgb([255, 255, 255]));
    }
    img.into_raw()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn allocation_has_a_minimum_then_follows_area() {
        // 1000 samples over 90 % / 9 % / 1 % of the map.
        let a = allocate(1000, &[900_000, 90_000, 10_000]);
        assert_eq!(a.iter().sum::<usize>(), 1000);
        assert!(a[2] >= MIN_PER_CLASS && a[1] >= MIN_PER_CLASS, "{a:?}");
        assert!(a[0] > a[1] && a[1] > a[2], "{a:?}");
        // Never more than a class has, and unmapped classes get none.
        let b = allocate(100, &[1000, 3, 0]);
        assert_eq!(b, vec![97, 3, 0]);
        assert_eq!(allocate(10, &[4, 2]), vec![4, 2]);
        assert_eq!(allocate(5, &[0, 0]), vec![0, 0]);
    }

    #[test]
    fn draws_distinct_pixels_of_the_right_class_reproducibly() {
        let a: Vec<u8> = (0..400).map(|i| (i % 3 == 0) as u8).collect();
        let b: Vec<u8> = (0..300).map(|i| (i % 5 == 0) as u8).collect();
        let maps = [a.as_slice(), b.as_slice()];
        let pts = draw(&maps, &[20, 15], &[30, 12], 9);
        assert_eq!(pts.iter().filter(|p| p.class == 0).count(), 30);
        assert_eq!(pts.iter().filter(|p| p.class == 1).count(), 12);
        for p in &pts {
            let w = [20, 15][p.map];
            assert_eq!(maps[p.map][p.y * w + p.x] as usize, p.class);
        }
        let mut seen: Vec<_> = pts.iter().map(|p| (p.map, p.y, p.x)).collect();
        seen.dedup();
        assert_eq!(seen.len(), pts.len(), "sorted and distinct");
        assert_eq!(pts, draw(&maps, &[20, 15], &[30, 12], 9));
        assert_ne!(pts, draw(&maps, &[20, 15], &[30, 12], 10));
    }
}

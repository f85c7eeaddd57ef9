//! Is a new image like the training images? A forest answers confidently even far outside
//! what it saw, so `apply` compares each image with a profile of the training images kept
//! in the model and warns, naming the image and what differs:
//!
//! - size: the features are in pixels, so a frame much smaller or larger than every training
//!   frame is often a different pixel scale (a downsampled export, another zoom);
//! - feature means: for each feature, how far the image's mean lies from the training
//!   images' average, in standard deviations of the training images' means (a z-score of
//!   the image mean). One feature far out is common (an image with more water than any
//!   training image moves the water-coloured features), so the image is flagged when a
//!   quarter of its features are far out: the 75th percentile of |z| exceeds [`DRIFT_Z`].
//!   Lighting, stain, focus and scale changes move many features at once; the threshold was
//!   chosen by measurement (`cargo bench --bench drift`, see [`DRIFT_Z`]).
//!
//! Moments are taken on every [`STRIDE`]-th pixel, the same way at training and at apply,
//! which costs nothing next to the forest.

use serde::{Deserialize, Serialize};

/// One pixel in this many enters the moments.
pub const STRIDE: usize = 8;

/// The least limit on the 75th percentile of the per-feature |z| (a model raises it when
/// one of its own training images scores near it, see [`TrainingProfile::limit`]). Measured on the demo scenes
/// (`cargo bench --bench drift`: 14 training, 6 held-out scenes; the table is in the
/// README): held-out scenes as generated and 10 % darker reach at most 1.04, the training
/// scenes themselves 1.34 (so that model's limit is 1.60), MRI slices (another domain)
/// 2.8–3.8, all flagged; 30 % brighter and lower-contrast scenes are flagged now and then,
/// blurred and 2x-coarser ones not. It flags images far outside the training set and stays
/// quiet on ordinary variation; it does not catch milder changes, which the README says.
pub const DRIFT_Z: f64 = 1.3;

/// Between-image spreads below this share of the within-image pixel SD are raised to it:
/// with one or two training images, or a texton that hardly occurs, the spread of the
/// training means says nothing.
const MIN_SPREAD: f32 = 0.25;

/// Frames whose width or height differ from every training frame by more than this factor
/// are flagged.
pub const SIZE_FACTOR: f64 = 2.0;

/// Running sums of features over pixels (f64: millions of f32 values).
#[derive(Clone, Debug, Default, PartialEq)]
pub struct FeatureMoments {
    pub n: u64,
    pub sum: Vec<f64>,
    pub sum_sq: Vec<f64>,
}

impl FeatureMoments {
    pub fn new(n_features: usize) -> Self {
        FeatureMoments {
            n: 0,
            sum: vec![0.0; n_features],
            sum_sq: vec![0.0; n_features],
        }
    }

    /// Adds every [`STRIDE`]-th row of pixel-major `rows` (`f` features per row), counting
    /// from `first`, the index of the first row in the caller's pixel order.
    pub fn add_rows(&mut self, rows: &[f32], f: usize, first: usize) {
        let skip = (STRIDE - first % STRIDE) % STRIDE;
        for row in rows.chunks_exact(f).skip(skip).step_by(STRIDE) {
            self.n += 1;
            for ((s, q), &v) in self.sum.iter_mut().zip(&mut self.sum_sq).zip(row) {
                let v = v as f64;
                *s += v;
                *q += v * v;
            }
        }
    }

    pub fn merge(&mut self, other: &FeatureMoments) {
        if self.sum.is_empty() {
            *self = other.clone();
            return;
        }
        self.n += other.n;
        self.sum
            .iter_mut()
            .zip(&other.sum)
            .for_each(|(a, b)| *a += b);
        self.sum_sq
            .iter_mut()
            .zip(&other.sum_sq)
            .for_each(|(a, b)| *a += b);
    }

    pub fn mean(&self) -> Vec<f64> {
        let n = self.n.max(1) as f64;
        self.sum.iter().map(|s| s / n).collect()
    }

    pub fn variance(&self) -> Vec<f64> {
        let n = self.n.max(1) as f64;
        self.sum
            .iter()
            .zip(&self.sum_sq)
            .map(|(s, q)| (q / n - (s / n).powi(2)).max(0.0))
            .collect()
    }
}

/// What the model remembers of its training images.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainingProfile {
    /// (width, height) of each training image.
    pub sizes: Vec<(u32, u32)>,
    /// Mean over training images of each image's feature mean.
    pub mean: Vec<f32>,
    /// Pooled within-image pixel standard deviation of each feature.
    pub pixel_sd: Vec<f32>,
    /// Standard deviation of the training images' means of each feature.
    pub image_sd: Vec<f32>,
    /// The drift score above which an image is flagged: [`DRIFT_Z`], or more when a
    /// training image itself scores near it ([`TRAINING_MARGIN`] × the highest training
    /// score), so a model never calls images like its own training images unlike them.
    pub limit: f32,
}

/// How far beyond the most atypical training image an image must lie to be flagged.
pub const TRAINING_MARGIN: f64 = 1.2;

impl TrainingProfile {
    /// From the per-image moments of the training images.
    pub fn from_images(sizes: Vec<(u32, u32)>, images: &[FeatureMoments]) -> Self {
        let f = images.first().map_or(0, |m| m.sum.len());
        let mut mean = vec![0.0f64; f];
        let mut var = vec![0.0f64; f];
        for m in images {
            mean.iter_mut().zip(m.mean()).for_each(|(a, b)| *a += b);
            var.iter_mut().zip(m.variance()).for_each(|(a, b)| *a += b);
        }
        let k = images.len().max(1) as f64;
        let mean: Vec<f64> = mean.iter().map(|m| m / k).collect();
        let mut between = vec![0.0f64; f];
        for m in images {
            between
                .iter_mut()
                .zip(m.mean().iter().zip(&mean))
                .for_each(|(b, (x, mu))| *b += (x - mu).powi(2));
        }
        let mut profile = TrainingProfile {
            sizes,
            mean: mean.iter().map(|&m| m as f32).collect(),
            pixel_sd: var.iter().map(|v| (v / k).sqrt() as f32).collect(),
            image_sd: between.iter().map(|b| (b / k).sqrt() as f32).collect(),
            limit: DRIFT_Z as f32,
        };
        let highest = images
            .iter()
            .map(|m| drift_score(&profile.z_scores(m)))
            .fold(0.0f64, f64::max);
        profile.limit = DRIFT_Z.max(TRAINING_MARGIN * highest) as f32;
        profile
    }

    /// Why `image` (of `width` × `height`, with `moments` from prediction) looks unlike the
    /// training images, one phrase per reason; empty if it does not.
    pub fn differences(
        &self,
        width: usize,
        height: usize,
        moments: &FeatureMoments,
        names: &[String],
    ) -> Vec<String> {
        let mut why = Vec::new();
        let near = |a: u32, b: usize| {
            let r = b as f64 / a.max(1) as f64;
            (1.0 / SIZE_FACTOR..=SIZE_FACTOR).contains(&r)
        };
        if !self.sizes.is_empty()
            && !self
                .sizes
                .iter()
                .any(|&(w, h)| near(w, width) && near(h, height))
        {
            let (w0, h0) = self.sizes[0];
            why.push(format!(
                "its size {width}x{height} is more than {SIZE_FACTOR}x away from every training image's (e.g. {w0}x{h0}); features are measured in pixels, so check the pixel scale is the same"
            ));
        }
        let z = self.z_scores(moments);
        let limit = self.limit as f64;
        if drift_score(&z) > limit {
            let mut far: Vec<(usize, f64)> = z
                .iter()
                .copied()
                .enumerate()
                .filter(|(_, z)| z.abs() > limit)
                .collect();
            far.sort_by(|a, b| b.1.abs().total_cmp(&a.1.abs()));
            let shown: Vec<String> = far
                .iter()
                .take(3)
                .map(|&(i, z)| {
                    let name = names.get(i).map_or("?", String::as_str);
                    format!("{name} {z:+.1}")
                })
                .collect();
            why.push(format!(
                "{} of its {} feature means are more than {limit:.1} SDs from the training images' (most: {}) — other lighting, stain, focus or pixel scale?",
                far.len(),
                z.len(),
                shown.join(", ")
            ));
        }
        why
    }

    /// Per feature: (image mean − training mean) / spread of the training images' means
    /// (at least [`MIN_SPREAD`] × the pixel SD). A feature constant in training scores 0.
    pub fn z_scores(&self, moments: &FeatureMoments) -> Vec<f64> {
        moments
            .mean()
            .iter()
            .zip(&self.mean)
            .zip(self.image_sd.iter().zip(&self.pixel_sd))
            .map(|((&m, &mu), (&between, &within))| {
                let sd = between.max(MIN_SPREAD * within);
                if sd > 1e-6 {
                    (m - mu as f64) / sd as f64
                } else {
                    0.0
                }
            })
            .collect()
    }
}

/// The 75th percentile of |z|: what [`DRIFT_Z`] limits.
pub fn drift_score(z: &[f64]) -> f64 {
    if z.is_empty() {
        return 0.0;
    }
    let mut a: Vec<f64> = z.iter().map(|v| v.abs()).collect();
    a.sort_by(f64::total_cmp);
    a[a.len() * 3 / 4]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn strided_moments_match_a_direct_sum_whatever_the_split() {
        let f = 3;
        let rows: Vec<f32> = (0..100 * f).map(|i| ((i * 37) % 11) as f32).collect();
        let mut whole = FeatureMoments::new(f);
        whole.add_rows(&rows, f, 0);
        let mut parts = FeatureMoments::new(f);
        for (b, chunk) in rows.chunks(13 * f).enumerate() {
            let mut m = FeatureMoments::new(f);
            m.add_rows(chunk, f, b * 13);
            parts.merge(&m);
        }
        assert_eq!(whole, parts);
        // Direct: rows 0, 8, 16, ...
        let picked: Vec<&[f32]> = rows.chunks(f).step_by(STRIDE).collect();
        assert_eq!(whole.n, picked.len() as u64);
        let s0: f64 = picked.iter().map(|r| r[0] as f64).sum();
        assert_eq!(whole.sum[0], s0);
    }

    #[test]
    fn flags_a_shifted_image_and_an_odd_size_but_not_a_similar_one() {
        // Two training images whose feature means differ a little; rows of 4 features.
        let rows = |shift: f32| -> Vec<f32> {
            (0..400)
                .flat_map(|i| (0..4).map(move |j| ((i * (j + 3)) % 7) as f32 + shift))
                .collect()
        };
        let moments = |shift: f32| {
            let mut m = FeatureMoments::new(4);
            m.add_rows(&rows(shift), 4, 0);
            m
        };
        let p =
            TrainingProfile::from_images(vec![(100, 80), (100, 80)], &[moments(0.0), moments(0.2)]);
        let names: Vec<String> = ["L", "a", "b", "dx"].map(String::from).to_vec();
        assert!(p.differences(120, 90, &moments(0.1), &names).is_empty());
        let d = p.differences(40, 30, &moments(5.0), &names);
        assert_eq!(d.len(), 2, "{d:?}");
        assert!(d[0].contains("40x30"), "{d:?}");
        assert!(d[1].contains("4 of its 4 feature means"), "{d:?}");
        assert!(drift_score(&p.z_scores(&moments(5.0))) > DRIFT_Z);
    }
}

//! Error-adjusted area estimates with confidence intervals, from a map and a reference sample.
//!
//! The stratified estimator of Olofsson et al. (2013, Remote Sensing of Environment
//! 129:122–131) and Olofsson et al. (2014, "Good practices for estimating area and assessing
//! accuracy of land change", RSE 148:42–57): the map's classes are the strata. With `N_h`
//! mapped pixels of class h (`W_h = N_h / N`), `n_h` reference pixels in stratum h, of
//! which `n_hk` have reference class k:
//!
//! - proportion of class k: `p̂_k = Σ_h W_h n_hk / n_h`, area `p̂_k · N` (× pixel area);
//! - `SE(p̂_k) = √(Σ_h W_h² (1 − n_h/N_h) q_hk (1 − q_hk) / (n_h − 1))`, `q_hk = n_hk / n_h`;
//! - 95 % CI: `± 1.96 SE`;
//! - user's accuracy of class i `U_i = n_ii / n_i`, `V = (1 − n_i/N_i) U_i (1 − U_i) / (n_i − 1)`;
//! - producer's accuracy `P_j = N_j q_jj / N̂_j`, `N̂_j = Σ_i N_i q_ij`, with the variance of
//!   Olofsson 2014 eq. 7 (ratio estimator);
//! - overall accuracy `O = Σ_h W_h q_hh`, `V = Σ_h W_h² (1 − n_h/N_h) U_h (1 − U_h)/(n_h − 1)`.
//!
//! The finite population correction `1 − n_h/N_h` (Stehman 2014, RSE 35:4923–4939) is kept:
//! a reference sample can be a sizeable share of an image's pixels. The check against the
//! paper's worked example and the PyPI package lulc-validation is in `tests/area_estimate.rs`.

use serde::Serialize;

/// Two-sided 95 % normal quantile.
const Z95: f64 = 1.96;

/// Estimates for one class.
#[derive(Clone, Debug, Serialize)]
pub struct ClassEstimate {
    pub name: String,
    /// Pixels mapped as this class (the stratum size).
    pub map_pixels: u64,
    /// Reference pixels in this stratum.
    pub sample_pixels: u64,
    /// Estimated share of the mapped area that truly is this class.
    pub proportion: f64,
    pub proportion_se: f64,
    /// `proportion × total` in pixels, or in the unit squared with a pixel size.
    pub area: f64,
    pub area_ci95: [f64; 2],
    /// Bootstrap over reference images (only when the reference is whole images).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub area_ci95_bootstrap: Option<[f64; 2]>,
    /// `None` when no reference pixel fell in the stratum (user's) or in the class (producer's).
    pub users_accuracy: Option<f64>,
    pub users_accuracy_ci95: Option<[f64; 2]>,
    pub producers_accuracy: Option<f64>,
    pub producers_accuracy_ci95: Option<[f64; 2]>,
}

/// The whole estimate, as `grove areas --json` writes it.
#[derive(Clone, Debug, Serialize)]
pub struct AreaEstimate {
    /// Marks the file as grove's own (see `output_guard`).
    pub generator: String,
    pub overall_accuracy: f64,
    pub overall_accuracy_ci95: [f64; 2],
    /// Mapped pixels (all strata).
    pub total_pixels: u64,
    /// Unit of `area`: "pixels" or e.g. "m2".
    pub unit: String,
    pub classes: Vec<ClassEstimate>,
    /// Things the user must know to read the numbers (thin strata, clustered reference).
    pub notes: Vec<String>,
}

/// The sample: per stratum (map class) and reference class, the count of reference pixels.
#[derive(Clone, Debug, PartialEq)]
pub struct ErrorMatrix {
    /// `counts[h][k]`: reference pixels mapped as h whose reference class is k.
    pub counts: Vec<Vec<u64>>,
}

impl ErrorMatrix {
    pub fn new(n_classes: usize) -> Self {
        ErrorMatrix {
            counts: vec![vec![0; n_classes]; n_classes],
        }
    }

    /// Adds pixel pairs (map class, reference class); reference values ≥ the class count
    /// (unlabelled) are skipped.
    pub fn add(&mut self, map: &[u8], reference: &[u8]) {
        let k = self.counts.len();
        for (&m, &r) in map.iter().zip(reference) {
            if (m as usize) < k && (r as usize) < k {
                self.counts[m as usize][r as usize] += 1;
            }
        }
    }

    pub fn add_matrix(&mut self, other: &ErrorMatrix) {
        for (a, b) in self.counts.iter_mut().zip(&other.counts) {
            a.iter_mut().zip(b).for_each(|(x, y)| *x += y);
        }
    }

    pub fn total(&self) -> u64 {
        self.counts.iter().flatten().sum()
    }
}

/// Point estimates only (for the bootstrap): proportions per class.
pub fn proportions(map_pixels: &[u64], m: &ErrorMatrix) -> Vec<f64> {
    let n_total: u64 = map_pixels.iter().sum();
    let k = map_pixels.len();
    let mut p = vec![0.0; k];
    for (h, row) in m.counts.iter().enumerate() {
        let n_h: u64 = row.iter().sum();
        let w_h = map_pixels[h] as f64 / n_total as f64;
        if n_h == 0 {
            // No reference in this stratum: the map is taken at its word (noted by `estimate`).
            p[h] += w_h;
            continue;
        }
        for (c, &n) in row.iter().enumerate() {
            p[c] += w_h * n as f64 / n_h as f64;
        }
    }
    p
}

fn ci(x: f64, se: f64) -> [f64; 2] {
    [x - Z95 * se, x + Z95 * se]
}

/// The estimate from the mapped pixel counts per class, the sample, the class names and the
/// area of one pixel (`None` = areas in pixels) with its unit.
pub fn estimate(
    names: &[String],
    map_pixels: &[u64],
    m: &ErrorMatrix,
    pixel_area: Option<(f64, &str)>,
) -> AreaEstimate {
    let k = names.len();
    let n_total: u64 = map_pixels.iter().sum();
    let big_n = n_total as f64;
    let scale = big_n * pixel_area.map_or(1.0, |(a, _)| a);
    let mut notes = Vec::new();
    let n_h: Vec<f64> = m
        .counts
        .iter()
        .map(|r| r.iter().sum::<u64>() as f64)
        .collect();
    let w: Vec<f64> = map_pixels.iter().map(|&n| n as f64 / big_n).collect();
    let q = |h: usize, c: usize| {
        if n_h[h] > 0.0 {
            m.counts[h][c] as f64 / n_h[h]
        } else {
            f64::from(u8::from(h == c))
        }
    };
    // Per-stratum variance factor (1 − n_h/N_h)/(n_h − 1), 0 where it cannot be estimated.
    let vf: Vec<f64> = (0..k)
        .map(|h| {
            if n_h[h] >= 2.0 {
                (1.0 - n_h[h] / map_pixels[h] as f64).max(0.0) / (n_h[h] - 1.0)
            } else {
                0.0
            }
        })
        .collect();
    for h in 0..k {
        if map_pixels[h] > 0 && n_h[h] < 2.0 {
            notes.push(format!(
                "stratum '{}' ({} mapped pixels) has {} reference pixel{}: its errors are not estimated (the map is taken at its word there) and the intervals are too narrow; sample at least a few dozen pixels per class",
                names[h],
                map_pixels[h],
                n_h[h],
                if n_h[h] == 1.0 { "" } else { "s" }
            ));
        }
    }
    let p = proportions(map_pixels, m);
    let users: Vec<Option<f64>> = (0..k).map(|i| (n_h[i] > 0.0).then(|| q(i, i))).collect();
    let est_ref: Vec<f64> = (0..k)
        .map(|j| (0..k).map(|i| map_pixels[i] as f64 * q(i, j)).sum())
        .collect();
    let mut classes = Vec::with_capacity(k);
    for c in 0..k {
        let var_p: f64 = (0..k)
            .map(|h| w[h] * w[h] * vf[h] * q(h, c) * (1.0 - q(h, c)))
            .sum();
        let se = var_p.sqrt();
        let users_ci = users[c].map(|u| ci(u, (vf[c] * u * (1.0 - u)).sqrt()));
        let producers = (est_ref[c] > 0.0).then(|| map_pixels[c] as f64 * q(c, c) / est_ref[c]);
        let producers_ci = producers.map(|pj| {
            let nj = map_pixels[c] as f64;
            let uj = q(c, c);
            let first = nj * nj * (1.0 - pj).powi(2) * uj * (1.0 - uj) * vf[c];
            let second: f64 = (0..k)
                .filter(|&i| i != c)
                .map(|i| {
                    let ni = map_pixels[i] as f64;
                    ni * ni * q(i, c) * (1.0 - q(i, c)) * vf[i]
                })
                .sum::<f64>()
                * pj
                * pj;
            ci(pj, ((first + second) / (est_ref[c] * est_ref[c])).sqrt())
        });
        classes.push(ClassEstimate {
            name: names[c].clone(),
            map_pixels: map_pixels[c],
            sample_pixels: n_h[c] as u64,
            proportion: p[c],
            proportion_se: se,
            area: p[c] * scale,
            area_ci95: [(p[c] - Z95 * se) * scale, (p[c] + Z95 * se) * scale],
            area_ci95_bootstrap: None,
            users_accuracy: users[c],
            users_accuracy_ci95: users_ci,
            producers_accuracy: producers,
            producers_accuracy_ci95: producers_ci,
        });
    }
    let overall: f64 = (0..k).map(|h| w[h] * q(h, h)).sum();
    let var_o: f64 = (0..k)
        .map(|h| w[h] * w[h] * vf[h] * q(h, h) * (1.0 - q(h, h)))
        .sum();
    AreaEstimate {
        generator: crate::output_guard::generator(),
        overall_accuracy: overall,
        overall_accuracy_ci95: ci(overall, var_o.sqrt()),
        total_pixels: n_total,
        unit: pixel_area.map_or("pixels".to_string(), |(_, u)| u.to_string()),
        classes,
        notes,
    }
}

/// 95 % percentile intervals of the class areas from resampling whole reference images with
/// replacement (`per_image` error matrices), `rounds` times from `seed`: honest when the
/// reference pixels of one image are not independent of each other.
pub fn bootstrap_area_ci(
    map_pixels: &[u64],
    per_image: &[ErrorMatrix],
    scale: f64,
    rounds: usize,
    seed: u64,
) -> Vec<[f64; 2]> {
    use rand::{Rng, SeedableRng};
    let k = map_pixels.len();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let mut draws: Vec<Vec<f64>> = vec![Vec::with_capacity(rounds); k];
    for _ in 0..rounds {
        let mut m = ErrorMatrix::new(k);
        for _ in 0..per_image.len() {
            m.add_matrix(&per_image[rng.gen_range(0..per_image.len())]);
        }
        for (c, p) in proportions(map_pixels, &m).into_iter().enumerate() {
            draws[c].push(p * scale);
        }
    }
    draws
        .into_iter()
        .map(|mut d| {
            d.sort_by(f64::total_cmp);
            let at = |q: f64| d[((d.len() - 1) as f64 * q).round() as usize];
            [at(0.025), at(0.975)]
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_perfect_map_is_its_own_estimate() {
        let mut m = ErrorMatrix::new(2);
        m.add(&[0, 0, 1, 1, 1], &[0, 0, 1, 1, 255]);
        let e = estimate(&["a".into(), "b".into()], &[300, 100], &m, None);
        assert_eq!(e.overall_accuracy, 1.0);
        assert_eq!(e.classes[0].area, 300.0);
        assert_eq!(e.classes[1].proportion_se, 0.0);
        assert_eq!(e.classes[1].sample_pixels, 2);
        assert!(e.notes.is_empty());
    }

    #[test]
    fn thin_strata_are_noted() {
        let mut m = ErrorMatrix::new(2);
        m.add(&[0, 0, 1], &[0, 1, 1]);
        let e = estimate(&["a".into(), "b".into()], &[10, 10], &m, Some((2.0, "m2")));
        assert_eq!(e.notes.len(), 1);
        assert!(e.notes[0].contains("'b'"));
        assert_eq!(e.unit, "m2");
        assert!((e.classes.iter().map(|c| c.area).sum::<f64>() - 40.0).abs() < 1e-9);
    }

    #[test]
    fn bootstrap_brackets_the_estimate() {
        let mut per_image = Vec::new();
        for i in 0..10u8 {
            let mut m = ErrorMatrix::new(2);
            let wrong = (i % 3) as usize;
            let map = vec![0u8; 10];
            let reference: Vec<u8> = (0..10).map(|j| u8::from(j < wrong)).collect();
            m.add(&map, &reference);
            m.add(&[1; 10], &[1; 10]);
            per_image.push(m);
        }
        let ci = bootstrap_area_ci(&[1000, 1000], &per_image, 2000.0, 500, 1);
        let mut all = ErrorMatrix::new(2);
        per_image.iter().for_each(|m| all.add_matrix(m));
        let p = proportions(&[1000, 1000], &all);
        assert!(ci[0][0] <= p[0] * 2000.0 && p[0] * 2000.0 <= ci[0][1]);
        assert!(ci[0][0] < ci[0][1]);
    }
}

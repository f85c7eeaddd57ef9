//! Per-pixel uncertainty of a prediction, and how well a score flags wrong pixels.
//!
//! From the class probabilities `p` of a pixel (sorted `p₁ ≥ p₂ ≥ …`, `K` classes):
//! - margin `p₁ − p₂` in [0, 1]: 0 = two classes tie (unsure), 1 = one class has it all;
//! - normalised entropy `−Σ pᵢ ln pᵢ / ln K` in [0, 1]: 1 = uniform (unsure), 0 = certain.
//!
//! Which score flags errors best was measured: AUROC ([`auroc`]) of the score for wrong vs
//! right pixels, models trained on scribbles (3 strokes per class on 3 images, 16 trees,
//! 16 textons), `cargo bench --bench active_learning -- --measure`, 2026-12-02:
//!
//! | pixels scored | wrong | 1 − p₁ | 1 − margin | entropy | tree disagreement | distance to strokes |
//! |---|---|---|---|---|---|---|
//! | demo hold-out (5 seeds × 5 scenes, 192²) | 19.2 % | 0.853 | 0.851 | 0.845 | 0.851 | – |
//! | demo, unlabelled pixels of the scribbled images | 7.6 % | 0.903 | 0.900 | 0.900 | 0.906 | 0.404 |
//! | mni152 hold-out (last 4 slices) | 3.1 % | 0.844 | 0.843 | 0.843 | 0.837 | – |
//! | mni152, unlabelled pixels of the scribbled slices | 3.5 % | 0.922 | 0.921 | 0.922 | 0.924 | 0.339 |
//!
//! The probability-based scores and the trees' disagreement (`Segmenter::predict_votes`, a
//! second forest walk) rank errors equally well (within 0.01, no consistent winner), and
//! distance to the labelled strokes is worse than chance (errors sit near strokes, at class
//! boundaries, as often as far away), so it is not used. The winning probability's problem is
//! its scale (most wrong pixels still have p₁ ≥ 0.5), not its ranking. `suggest` uses
//! 1 − margin: as good as any, free, and it names the two classes in doubt.
//!
//! [`unsureness`] is the score `suggest` ranks by.

use crate::segmenter::Probabilities;

/// `p₁ − p₂` of one pixel's probabilities (0 with fewer than two classes is impossible:
/// a model has at least two).
pub fn margin(p: &[f32]) -> f32 {
    let (mut a, mut b) = (f32::NEG_INFINITY, f32::NEG_INFINITY);
    for &v in p {
        if v > a {
            b = a;
            a = v;
        } else if v > b {
            b = v;
        }
    }
    (a - b).clamp(0.0, 1.0)
}

/// Shannon entropy of `p` divided by `ln K` (terms with `pᵢ = 0` contribute 0).
pub fn normalised_entropy(p: &[f32]) -> f32 {
    if p.len() < 2 {
        return 0.0;
    }
    let h: f32 = p.iter().filter(|&&v| v > 0.0).map(|&v| -v * v.ln()).sum();
    (h / (p.len() as f32).ln()).clamp(0.0, 1.0)
}

/// The two maps `apply --uncertainty` writes, row-major.
pub struct UncertaintyMaps {
    pub width: usize,
    pub height: usize,
    /// Per pixel [`margin`]: low = unsure.
    pub margin: Vec<f32>,
    /// Per pixel [`normalised_entropy`]: high = unsure.
    pub entropy: Vec<f32>,
}

impl UncertaintyMaps {
    pub fn new(probs: &Probabilities) -> Self {
        let px = || probs.data.chunks_exact(probs.n_classes);
        UncertaintyMaps {
            width: probs.width,
            height: probs.height,
            margin: px().map(margin).collect(),
            entropy: px().map(normalised_entropy).collect(),
        }
    }
}

/// Per pixel, how unsure the model is, in [0, 1] (1 = unsure): `1 − margin` (see the
/// measurements above).
pub fn unsureness(probs: &Probabilities) -> Vec<f32> {
    probs
        .data
        .chunks_exact(probs.n_classes)
        .map(|p| 1.0 - margin(p))
        .collect()
}

/// Area under the ROC curve of `score` as a detector of `wrong` pixels: the probability that
/// a random wrong pixel scores higher than a random right one, ties counting one half (the
/// Mann–Whitney U statistic divided by n₁n₀; Hanley & McNeil 1982, Radiology 143:29–36).
/// Scores are bucketed to 1/4096 (they are probabilities stored as f32, and 8-bit maps are
/// coarser still). `None` when all pixels are right or all wrong.
pub fn auroc(score: &[f32], wrong: &[bool]) -> Option<f64> {
    const BINS: usize = 4096;
    let mut pos = vec![0u64; BINS + 1];
    let mut neg = vec![0u64; BINS + 1];
    for (&s, &w) in score.iter().zip(wrong) {
        let b = (s.clamp(0.0, 1.0) * BINS as f32).round() as usize;
        if w {
            pos[b] += 1
        } else {
            neg[b] += 1
        }
    }
    let (n1, n0): (u64, u64) = (pos.iter().sum(), neg.iter().sum());
    if n1 == 0 || n0 == 0 {
        return None;
    }
    // For each bucket: wrong pixels there beat all right pixels below, tie with those in it.
    let (mut below, mut u) = (0u64, 0f64);
    for b in 0..=BINS {
        u += pos[b] as f64 * (below as f64 + 0.5 * neg[b] as f64);
        below += neg[b];
    }
    Some(u / (n1 as f64 * n0 as f64))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The definition, pair by pair.
    fn auroc_pairs(score: &[f32], wrong: &[bool]) -> f64 {
        let (mut u, mut n) = (0.0, 0.0);
        for (i, &si) in score.iter().enumerate() {
            for (j, &sj) in score.iter().enumerate() {
                if wrong[i] && !wrong[j] {
                    n += 1.0;
                    u += if si > sj {
                        1.0
                    } else if si == sj {
                        0.5
                    } else {
                        0.0
                    };
                }
            }
        }
        u / n
    }

    #[test]
    fn auroc_matches_the_pairwise_definition() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let score: Vec<f32> = (0..300)
            .map(|_| (rng.gen_range(0..50) as f32) / 49.0)
            .collect();
        let wrong: Vec<bool> = score.iter().map(|&s| rng.gen::<f32>() < s).collect();
        let a = auroc(&score, &wrong).unwrap();
        assert!((a - auroc_pairs(&score, &wrong)).abs() < 1e-12);
        assert!(a > 0.6);
        assert_eq!(auroc(&[0.1, 0.9], &[false, true]), Some(1.0));
        assert_eq!(auroc(&[0.5, 0.5], &[false, true]), Some(0.5));
        assert_eq!(auroc(&[0.5], &[true]), None);
    }

    #[test]
    fn margin_and_entropy_at_their_extremes() {
        assert_eq!(margin(&[0.5, 0.5, 0.0]), 0.0);
        assert_eq!(margin(&[1.0, 0.0, 0.0]), 1.0);
        assert!((margin(&[0.2, 0.7, 0.1]) - 0.5).abs() < 1e-6);
        assert!((normalised_entropy(&[0.25; 4]) - 1.0).abs() < 1e-6);
        assert_eq!(normalised_entropy(&[0.0, 1.0]), 0.0);
        // Two equal classes out of four: ln 2 / ln 4 = 1/2.
        assert!((normalised_entropy(&[0.5, 0.5, 0.0, 0.0]) - 0.5).abs() < 1e-6);
    }
}

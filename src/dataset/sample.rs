//! Which labelled pixels train the forest.
//!
//! Class-balanced: each image spends an equal budget on every class it contains, so a
//! class drawn with three short strokes is not drowned by a background painted in bulk
//! (the reference pipeline samples the same way).

use rand::Rng;

use crate::dataset::labels::{LabelMap, UNLABELLED};

/// Up to `budget / (classes present)` pixel indices per class, without replacement,
/// returned sorted (sequential reads later).
pub fn balanced_sample<R: Rng>(
    labels: &LabelMap,
    n_classes: usize,
    budget: usize,
    rng: &mut R,
) -> Vec<u32> {
    let mut by_class: Vec<Vec<u32>> = vec![Vec::new(); n_classes];
    for (i, &c) in labels.indices.iter().enumerate() {
        if c != UNLABELLED {
            by_class[c as usize].push(i as u32);
        }
    }
    let present = by_class.iter().filter(|v| !v.is_empty()).count();
    if present == 0 {
        return Vec::new();
    }
    let per_class = (budget / present).max(1);
    let mut out = Vec::with_capacity(budget);
    for mut pixels in by_class {
        out.extend_from_slice(choose(&mut pixels, per_class, rng));
    }
    out.sort_unstable();
    out
}

/// `count` distinct pixel indices out of `n`, uniformly (for the texton dictionary, which
/// describes appearance and so may use unlabelled pixels too).
pub fn uniform_sample<R: Rng>(n: usize, count: usize, rng: &mut R) -> Vec<u32> {
    let mut all: Vec<u32> = (0..n as u32).collect();
    let mut out = choose(&mut all, count, rng).to_vec();
    out.sort_unstable();
    out
}

/// Partial Fisher–Yates: the first `k` items of `v` become a uniform sample without replacement.
fn choose<'a, R: Rng>(v: &'a mut [u32], k: usize, rng: &mut R) -> &'a [u32] {
    let k = k.min(v.len());
    for i in 0..k {
        let j = rng.gen_range(i..v.len());
        v.swap(i, j);
    }
    &v[..k]
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn balanced_sample_is_balanced_and_skips_unlabelled() {
        let mut indices = vec![0u8; 1000];
        indices[..10].fill(1);
        indices[10..20].fill(UNLABELLED);
        let labels = LabelMap {
            width: 100,
            height: 10,
            indices,
        };
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(1);
        let s = balanced_sample(&labels, 2, 100, &mut rng);
        let ones = s
            .iter()
            .filter(|&&i| labels.indices[i as usize] == 1)
            .count();
        assert_eq!(ones, 10, "all 10 pixels of the rare class");
        assert_eq!(s.len(), 60, "50 of the common class + 10 of the rare");
        assert!(s.iter().all(|&i| labels.indices[i as usize] != UNLABELLED));
        assert!(s.windows(2).all(|w| w[0] < w[1]), "sorted and distinct");
    }
}

//! The slow, obviously correct twin of `grove::eval::BoundaryCounts::add`: per class,
//! imageproc's Euclidean distance transform (Felzenszwalb & Huttenlocher) of the true and
//! predicted boundary masks, and of the unlabelled mask for the scored region — the textbook
//! formulation. Shared by `tests/boundary_scipy.rs` (as a reference on random maps) and
//! `benches/boundary.rs` (to measure it against the disc scan grove keeps).

use grove::eval::BoundaryCounts;
use image::{GrayImage, Luma};
use imageproc::distance_transform::euclidean_squared_distance_transform;

/// Inner boundary over the 4-neighbourhood, written out per pixel (no pair marking).
fn edge(w: usize, h: usize, lab: &[u8], ignore: Option<u8>, i: usize) -> bool {
    let (x, y) = (i % w, i / w);
    if Some(lab[i]) == ignore {
        return false;
    }
    let differs = |j: usize| lab[j] != lab[i] && Some(lab[j]) != ignore;
    (x > 0 && differs(i - 1))
        || (x + 1 < w && differs(i + 1))
        || (y > 0 && differs(i - w))
        || (y + 1 < h && differs(i + w))
}

fn squared_distance_to(w: usize, h: usize, mask: impl Fn(usize) -> bool) -> Vec<f64> {
    let img = GrayImage::from_fn(w as u32, h as u32, |x, y| {
        Luma([mask(y as usize * w + x as usize) as u8])
    });
    euclidean_squared_distance_transform(&img)
        .pixels()
        .map(|p| p[0])
        .collect()
}

pub fn reference_counts(
    w: usize,
    h: usize,
    truth: &[u8],
    pred: &[u8],
    ignore: u8,
    n_classes: usize,
    tolerance: f32,
) -> BoundaryCounts {
    let t2 = (tolerance as f64).powi(2);
    let te: Vec<bool> = (0..w * h)
        .map(|i| edge(w, h, truth, Some(ignore), i))
        .collect();
    let pe: Vec<bool> = (0..w * h).map(|i| edge(w, h, pred, None, i)).collect();
    let unlabelled = squared_distance_to(w, h, |i| truth[i] == ignore);
    let mut out = BoundaryCounts::new(n_classes, tolerance).unwrap();
    for c in 0..n_classes {
        let c8 = c as u8;
        let to_truth = squared_distance_to(w, h, |i| te[i] && truth[i] == c8);
        let to_pred = squared_distance_to(w, h, |i| pe[i] && pred[i] == c8);
        for i in 0..w * h {
            if pe[i] && pred[i] == c8 && unlabelled[i] > t2 {
                out.predicted[c] += 1;
                out.predicted_matched[c] += (to_truth[i] <= t2) as u64;
            }
            if te[i] && truth[i] == c8 {
                out.truth[c] += 1;
                out.truth_matched[c] += (to_pred[i] <= t2) as u64;
            }
        }
    }
    out
}

/// A blocky `w × h` map of `k` classes (cells of `cell` px) with unlabelled pixels at rate
/// `unlabelled`, and a prediction with speckle at rate `noise`: a forest map's look.
pub fn random_pair(
    seed: u64,
    w: usize,
    h: usize,
    k: usize,
    cell: usize,
    noise: f64,
    unlabelled: f64,
) -> (Vec<u8>, Vec<u8>) {
    use rand::{Rng, SeedableRng};
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(seed);
    let cw = w / cell + 1;
    let cells: Vec<u8> = (0..cw * (h / cell + 1))
        .map(|_| rng.gen_range(0..k as u8))
        .collect();
    let clean: Vec<u8> = (0..w * h)
        .map(|i| cells[(i / w / cell) * cw + (i % w) / cell])
        .collect();
    let pred = clean
        .iter()
        .map(|&t| {
            if rng.gen_bool(noise) {
                rng.gen_range(0..k as u8)
            } else {
                t
            }
        })
        .collect();
    let truth = clean
        .iter()
        .map(|&t| if rng.gen_bool(unlabelled) { 255 } else { t })
        .collect();
    (truth, pred)
}

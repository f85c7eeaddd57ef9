//! Property tests (proptest): invariants that must hold for any input, checked on random
//! inputs and shrunk to a minimal case when one fails.
//!
//! - Metrics: IoU and accuracies lie in [0, 1]; the confusion matrix counts exactly the
//!   labelled pixels; renaming class ids (a permutation) permutes every per-class result and
//!   leaves the means unchanged. These follow from the definitions (IoU = tp / (tp + fp + fn),
//!   Jaccard 1901; Everingham et al. 2010, PASCAL VOC).
//! - Texton histograms: the prefix-sum (integral image) window counts equal a brute-force
//!   count over the reflected window, for any map, window and image size (also windows larger
//!   than the image), with scipy.ndimage's 'reflect' boundary.
//! - Model files: encode → decode → encode gives the same bytes, and no changed byte makes the
//!   loader panic.

use grove::dataset::{Dataset, LabelOptions};
use grove::eval::ConfusionMatrix;
use grove::features::textons::texton_histograms;
use grove::progress::Progress;
use grove::segmenter::TrainConfig;
use proptest::prelude::*;

const UNLABELLED: u8 = 255;

/// Truth (with unlabelled pixels) and prediction of `k` classes, same length.
fn label_pair() -> impl Strategy<Value = (usize, Vec<u8>, Vec<u8>)> {
    (1usize..8, 0usize..400).prop_flat_map(|(k, n)| {
        let truth =
            proptest::collection::vec(prop_oneof![4 => 0..k as u8, 1 => Just(UNLABELLED)], n);
        let pred = proptest::collection::vec(0..k as u8, n);
        (Just(k), truth, pred)
    })
}

fn matrix(k: usize, truth: &[u8], pred: &[u8]) -> ConfusionMatrix {
    let mut cm = ConfusionMatrix::new(k);
    cm.add(truth, pred, Some(UNLABELLED as u32)).unwrap();
    cm
}

fn close(a: Option<f64>, b: Option<f64>) -> bool {
    match (a, b) {
        (Some(a), Some(b)) => (a - b).abs() < 1e-12,
        (None, None) => true,
        _ => false,
    }
}

proptest! {
    #[test]
    fn scores_lie_in_the_unit_interval((k, truth, pred) in label_pair()) {
        let cm = matrix(k, &truth, &pred);
        let unit = |v: Option<f64>| v.is_none_or(|v| (0.0..=1.0).contains(&v));
        prop_assert!(cm.per_class_iou().into_iter().all(unit));
        prop_assert!(cm.per_class_accuracy().into_iter().all(unit));
        prop_assert!(unit(cm.mean_iou()) && unit(cm.mean_class_accuracy()));
        prop_assert!(unit(cm.pixel_accuracy()));
        // IoU never exceeds the class's accuracy (its union is at least its truth count).
        for (iou, acc) in cm.per_class_iou().into_iter().zip(cm.per_class_accuracy()) {
            if let (Some(i), Some(a)) = (iou, acc) {
                prop_assert!(i <= a + 1e-12);
            }
        }
    }

    #[test]
    fn confusion_counts_exactly_the_labelled_pixels((k, truth, pred) in label_pair()) {
        let cm = matrix(k, &truth, &pred);
        let labelled = truth.iter().filter(|&&t| t != UNLABELLED).count() as u64;
        prop_assert_eq!(cm.total(), labelled);
        prop_assert_eq!(cm.counts().iter().sum::<u64>(), labelled);
        for c in 0..k {
            let in_truth = truth.iter().filter(|&&t| t as usize == c).count() as u64;
            prop_assert_eq!(cm.truth_count(c), in_truth);
        }
    }

    #[test]
    fn permuting_class_ids_permutes_the_results(
        (k, truth, pred, perm) in label_pair().prop_flat_map(|(k, t, p)| {
            let perm = Just((0..k as u8).collect::<Vec<u8>>()).prop_shuffle();
            (Just(k), Just(t), Just(p), perm)
        })
    ) {
        let rename = |v: &[u8]| -> Vec<u8> {
            v.iter().map(|&c| if c == UNLABELLED { c } else { perm[c as usize] }).collect()
        };
        let a = matrix(k, &truth, &pred);
        let b = matrix(k, &rename(&truth), &rename(&pred));
        for t in 0..k {
            for p in 0..k {
                prop_assert_eq!(a.get(t, p), b.get(perm[t] as usize, perm[p] as usize));
            }
        }
        let (ia, ib) = (a.per_class_iou(), b.per_class_iou());
        let (ca, cb) = (a.per_class_accuracy(), b.per_class_accuracy());
        for c in 0..k {
            prop_assert!(close(ia[c], ib[perm[c] as usize]));
            prop_assert!(close(ca[c], cb[perm[c] as usize]));
        }
        prop_assert!(close(a.mean_iou(), b.mean_iou()));
        prop_assert!(close(a.mean_class_accuracy(), b.mean_class_accuracy()));
        prop_assert!(close(a.pixel_accuracy(), b.pixel_accuracy()));
    }
}

/// scipy.ndimage 'reflect' boundary (`d c b a | a b c d | d c b a`), by repeated mirroring.
fn reflect(mut i: i64, n: i64) -> usize {
    while i < 0 || i >= n {
        i = if i < 0 { -i - 1 } else { 2 * n - 1 - i };
    }
    i as usize
}

/// A texton map (`w × h`, ids below `k`) and an odd window of up to 3 image sides.
fn texton_case() -> impl Strategy<Value = (usize, usize, usize, usize, Vec<u16>)> {
    (1usize..12, 1usize..12, 1usize..6).prop_flat_map(|(w, h, k)| {
        let window = (0..(3 * w.max(h)) / 2 + 1).prop_map(|r| 2 * r + 1);
        let map = proptest::collection::vec(0..k as u16, w * h);
        (Just(w), Just(h), Just(k), window, map)
    })
}

proptest! {
    #[test]
    fn window_sums_equal_brute_force((w, h, k, window, map) in texton_case()) {
        let planes = texton_histograms(&map, w, h, k, window).unwrap();
        let r = (window / 2) as i64;
        for y in 0..h {
            for x in 0..w {
                let mut counts = vec![0u32; k];
                for dy in -r..=r {
                    for dx in -r..=r {
                        let t = map[reflect(y as i64 + dy, h as i64) * w
                            + reflect(x as i64 + dx, w as i64)];
                        counts[t as usize] += 1;
                    }
                }
                for (plane, &n) in planes.iter().zip(&counts) {
                    let want = n as f32 / (window * window) as f32;
                    prop_assert!((plane.get(x, y) - want).abs() <= 1e-6, "{} vs {}", plane.get(x, y), want);
                }
            }
        }
    }
}

/// A small model trained on two demo scenes with the given seed and sizes.
fn small_model(seed: u64, trees: usize, textons: usize) -> grove::segmenter::Segmenter {
    let t = tempfile::tempdir().unwrap();
    grove::demo::write_demo_dataset(t.path(), 0..2, 48, seed).unwrap();
    let ds = Dataset::open(t.path(), LabelOptions::default()).unwrap();
    let mut cfg = TrainConfig {
        seed,
        ..TrainConfig::default()
    };
    cfg.features.textons = textons;
    cfg.features.bank.scales = vec![1.0];
    cfg.forest.n_trees = trees;
    cfg.samples_per_image = 300;
    cfg.fit(&ds, &ds.labelled(), Progress::default()).unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 6, ..ProptestConfig::default() })]

    #[test]
    fn model_bytes_round_trip(seed in 0u64..1000, trees in 1usize..4, textons in 2usize..6) {
        let bytes = grove::model::to_bytes(&small_model(seed, trees, textons));
        let decoded = grove::model::from_bytes(&bytes).unwrap();
        prop_assert!(grove::model::to_bytes(&decoded) == bytes, "re-encoded bytes differ");
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    #[test]
    fn changed_model_bytes_never_panic(at in any::<prop::sample::Index>(), xor in 1u8..=255, cut in any::<prop::sample::Index>()) {
        use std::sync::OnceLock;
        static BYTES: OnceLock<Vec<u8>> = OnceLock::new();
        let bytes = BYTES.get_or_init(|| grove::model::to_bytes(&small_model(1, 2, 3)));
        let mut changed = bytes.clone();
        changed[at.index(bytes.len())] ^= xor;
        // The checksum catches every change; what matters is an error, not a panic.
        prop_assert!(grove::model::from_bytes(&changed).is_err());
        let _ = grove::model::from_bytes(&bytes[..cut.index(bytes.len())]);
    }
}

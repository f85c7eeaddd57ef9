//! Boundary F1 against an independent implementation on scipy.ndimage's Euclidean distance
//! transform (fixture and script in `tests/fixtures/boundary/`, numpy and scipy versions
//! recorded in the fixture). Counts must agree exactly; F1 values to 1e-12 (same integer
//! counts divided in f64, summed in the same order).

use grove::eval::BoundaryCounts;
use serde_json::Value;

fn u64s(v: &Value) -> Vec<u64> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_u64().unwrap())
        .collect()
}

#[test]
fn boundary_counts_and_f1_match_scipy() {
    let fx: Value = serde_json::from_str(include_str!("fixtures/boundary/boundary.json")).unwrap();
    let ignore = fx["ignore"].as_u64().unwrap() as u8;
    let cases = fx["cases"].as_array().unwrap();
    assert!(cases.len() >= 5);
    for (i, case) in cases.iter().enumerate() {
        let (w, h) = (
            case["width"].as_u64().unwrap() as usize,
            case["height"].as_u64().unwrap() as usize,
        );
        let k = case["n_classes"].as_u64().unwrap() as usize;
        let tol = case["tolerance"].as_f64().unwrap() as f32;
        let truth: Vec<u8> = u64s(&case["truth"]).iter().map(|&v| v as u8).collect();
        let pred: Vec<u8> = u64s(&case["pred"]).iter().map(|&v| v as u8).collect();
        let mut got = BoundaryCounts::new(k, tol).unwrap();
        got.add(w, h, &truth, &pred, ignore).unwrap();
        let want = &case["counts"];
        assert_eq!(
            got.predicted,
            u64s(&want["predicted"]),
            "case {i}: predicted"
        );
        assert_eq!(
            got.predicted_matched,
            u64s(&want["predicted_matched"]),
            "case {i}"
        );
        assert_eq!(got.truth, u64s(&want["truth"]), "case {i}: truth");
        assert_eq!(got.truth_matched, u64s(&want["truth_matched"]), "case {i}");
        let per: Vec<Option<f64>> = case["per_class_f1"]
            .as_array()
            .unwrap()
            .iter()
            .map(Value::as_f64)
            .collect();
        for (c, (g, w)) in got.per_class_f1().iter().zip(&per).enumerate() {
            match (g, w) {
                (Some(g), Some(w)) => assert!((g - w).abs() < 1e-12, "case {i} class {c}"),
                (None, None) => {}
                _ => panic!("case {i} class {c}: {g:?} vs scipy {w:?}"),
            }
        }
        match (got.mean_f1(), case["mean_f1"].as_f64()) {
            (Some(g), Some(w)) => assert!((g - w).abs() < 1e-12, "case {i}: {g} vs {w}"),
            (None, None) => {}
            (g, w) => panic!("case {i}: mean {g:?} vs scipy {w:?}"),
        }
    }
    // The scribble-like case has no touching strokes: boundary F1 is undefined.
    assert!(cases.last().unwrap()["mean_f1"].is_null());
}

#[path = "support/boundary_edt.rs"]
mod boundary_edt;

/// The disc scan equals the distance-transform twin (imageproc's Euclidean distance
/// transform per class) on random blocky maps with unlabelled pixels, odd sizes and several
/// tolerances, including ones between integers.
#[test]
fn disc_scan_matches_imageproc_distance_transform() {
    for case in 0..12u64 {
        let (w, h) = (5 + (case as usize * 7) % 37, 5 + (case as usize * 11) % 31);
        let k = 2 + case as usize % 4;
        let cell = 1 + case as usize % 6;
        let (truth, pred) = boundary_edt::random_pair(case, w, h, k, cell, 0.1, 0.05);
        for tol in [0.0, 1.0, 1.5, 2.0, 3.3] {
            let mut fast = BoundaryCounts::new(k, tol).unwrap();
            fast.add(w, h, &truth, &pred, 255).unwrap();
            let slow = boundary_edt::reference_counts(w, h, &truth, &pred, 255, k, tol);
            assert_eq!(fast, slow, "case {case}, {w}x{h}, tolerance {tol}");
        }
    }
}

//! ConfusionMatrix metrics against scikit-learn (fixture made by
//! `tests/fixtures/metrics/make_metrics_fixture.py`; the sklearn version is recorded in the
//! fixture). Tolerance 1e-12: both sides divide the same integer counts in f64; only the order
//! of summation in the means can differ, by a few ulps.

use grove::eval::ConfusionMatrix;
use serde_json::Value;

const TOL: f64 = 1e-12;

fn fixture() -> Value {
    let text = include_str!("fixtures/metrics/metrics.json");
    serde_json::from_str(text).expect("metrics fixture is JSON")
}

fn u32s(v: &Value) -> Vec<u32> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|x| x.as_u64().unwrap() as u32)
        .collect()
}

fn options(v: &Value) -> Vec<Option<f64>> {
    v.as_array().unwrap().iter().map(Value::as_f64).collect()
}

fn assert_close(got: f64, want: f64, what: &str) {
    assert!((got - want).abs() <= TOL, "{what}: {got} vs sklearn {want}");
}

fn matrix(fx: &Value) -> ConfusionMatrix {
    let n = fx["n_classes"].as_u64().unwrap() as usize;
    let ignore = fx["ignore"].as_u64().unwrap() as u32;
    let truth: Vec<u8> = u32s(&fx["truth"]).iter().map(|&v| v as u8).collect();
    let pred = u32s(&fx["pred"]);
    let mut cm = ConfusionMatrix::new(n);
    // Two halves merged, to exercise merge() as well.
    let half = truth.len() / 2;
    cm.add(&truth[..half], &pred[..half], Some(ignore)).unwrap();
    let mut rest = ConfusionMatrix::new(n);
    rest.add(&truth[half..], &pred[half..], Some(ignore))
        .unwrap();
    cm.merge(&rest).unwrap();
    cm
}

/// sklearn.metrics.confusion_matrix (rows truth, columns prediction) and accuracy_score.
#[test]
fn confusion_and_accuracy_match_sklearn() {
    let fx = fixture();
    let cm = matrix(&fx);
    let want: Vec<u64> = u32s(&fx["confusion"]).iter().map(|&v| v as u64).collect();
    assert_eq!(cm.counts(), want.as_slice());
    assert_close(
        cm.pixel_accuracy().unwrap(),
        fx["pixel_accuracy"].as_f64().unwrap(),
        "pixel accuracy",
    );
}

/// sklearn.metrics.jaccard_score(average=None) per class (None = class absent from both truth
/// and prediction, skipped by the script) and average='macro' over the present classes.
#[test]
fn iou_matches_sklearn_jaccard() {
    let fx = fixture();
    let cm = matrix(&fx);
    let want = options(&fx["per_class_iou"]);
    let got = cm.per_class_iou();
    assert!(
        want.iter().any(Option::is_none),
        "fixture must have an absent class"
    );
    assert_eq!(got.len(), want.len());
    for (c, (g, w)) in got.iter().zip(&want).enumerate() {
        match (g, w) {
            (Some(g), Some(w)) => assert_close(*g, *w, &format!("IoU of class {c}")),
            (None, None) => {}
            _ => panic!("class {c}: presence differs ({g:?} vs {w:?})"),
        }
    }
    assert_close(
        cm.mean_iou().unwrap(),
        fx["mean_iou"].as_f64().unwrap(),
        "mean IoU",
    );
}

/// sklearn.metrics.recall_score(average=None) per class present in truth, and
/// balanced_accuracy_score (mean recall over classes present in truth).
#[test]
fn class_accuracy_matches_sklearn_recall() {
    let fx = fixture();
    let cm = matrix(&fx);
    let want = options(&fx["per_class_accuracy"]);
    for (c, (g, w)) in cm.per_class_accuracy().iter().zip(&want).enumerate() {
        match (g, w) {
            (Some(g), Some(w)) => assert_close(*g, *w, &format!("recall of class {c}")),
            (None, None) => {}
            _ => panic!("class {c}: presence differs ({g:?} vs {w:?})"),
        }
    }
    assert_close(
        cm.mean_class_accuracy().unwrap(),
        fx["mean_class_accuracy"].as_f64().unwrap(),
        "mean class accuracy",
    );
}

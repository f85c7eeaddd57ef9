//! Random forest checked against outside references on a real dataset, plus determinism and
//! input validation.
//!
//! Data: `sklearn.datasets.load_digits` (the UCI optical handwritten digits bundled with
//! scikit-learn: 1797 images of 8×8 pixels, values 0..16, 10 classes), written with a fixed
//! stratified 70/30 split by `tests/fixtures/forest/make_forest_fixture.py`, which also records
//! scikit-learn's `RandomForestClassifier(n_estimators=32)` test accuracy over 5 seeds.

use grove::forest::{ForestConfig, RandomForest};
use grove::GroveError;
use linfa::prelude::*;
use linfa_trees::DecisionTree;
use ndarray::{Array1, Array2};

const FIXTURE_DIR: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/forest");
const N_FEATURES: usize = 64;
const N_CLASSES: usize = 10;

struct Split {
    x_train: Vec<f32>,
    y_train: Vec<u32>,
    x_test: Vec<f32>,
    y_test: Vec<u32>,
}

fn load_digits() -> Split {
    let text = std::fs::read_to_string(format!("{FIXTURE_DIR}/digits.csv")).unwrap();
    let mut s = Split {
        x_train: vec![],
        y_train: vec![],
        x_test: vec![],
        y_test: vec![],
    };
    for line in text.lines().skip(1) {
        let v: Vec<u32> = line.split(',').map(|t| t.parse().unwrap()).collect();
        assert_eq!(v.len(), 2 + N_FEATURES);
        let (x, y) = if v[1] == 0 {
            (&mut s.x_train, &mut s.y_train)
        } else {
            (&mut s.x_test, &mut s.y_test)
        };
        y.push(v[0]);
        x.extend(v[2..].iter().map(|&p| p as f32));
    }
    assert_eq!((s.y_train.len(), s.y_test.len()), (1257, 540));
    s
}

fn meta() -> serde_json::Value {
    let text = std::fs::read_to_string(format!("{FIXTURE_DIR}/digits_meta.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

fn accuracy(pred: &[u32], truth: &[u32]) -> f64 {
    pred.iter().zip(truth).filter(|(a, b)| a == b).count() as f64 / truth.len() as f64
}

fn fit_digits(d: &Split, seed: u64) -> RandomForest {
    let cfg = ForestConfig {
        seed,
        ..ForestConfig::default()
    };
    RandomForest::fit(&cfg, &d.x_train, N_FEATURES, &d.y_train, N_CLASSES).unwrap()
}

/// Reference 1: scikit-learn 1.9.1 `RandomForestClassifier(n_estimators=32)`, mean test
/// accuracy over seeds 0..4 (from the fixture; 0.9707). Ours (32 trees, defaults), averaged over
/// 3 seeds because one 32-tree forest varies by ~±0.7 points on 540 test images, must be within
/// 2 points of it — our bins, ≥ 2 samples per leaf and depth cap differ from scikit-learn's
/// exact, fully grown trees, so equality is not expected.
/// Reference 2: linfa-trees 0.8.1 `DecisionTree` with default parameters (Gini), trained here on
/// the same split: a forest must not be worse than a single tree.
#[test]
fn digits_accuracy_matches_sklearn_and_beats_linfa_tree() {
    let d = load_digits();
    let sklearn_mean = meta()["sklearn_test_accuracy_mean"].as_f64().unwrap();

    let seeds = [0u64, 1, 2];
    let ours: f64 = seeds
        .iter()
        .map(|&s| accuracy(&fit_digits(&d, s).predict(&d.x_test), &d.y_test))
        .sum::<f64>()
        / seeds.len() as f64;

    let to_array = |x: &[f32]| {
        Array2::from_shape_vec(
            (x.len() / N_FEATURES, N_FEATURES),
            x.iter().map(|&v| v as f64).collect(),
        )
        .unwrap()
    };
    let train = Dataset::new(
        to_array(&d.x_train),
        Array1::from_iter(d.y_train.iter().map(|&l| l as usize)),
    );
    let tree = DecisionTree::params().fit(&train).unwrap();
    let linfa_pred: Vec<u32> = tree
        .predict(&to_array(&d.x_test))
        .iter()
        .map(|&l| l as u32)
        .collect();
    let linfa = accuracy(&linfa_pred, &d.y_test);

    eprintln!(
        "digits test accuracy: ours {ours:.4}, sklearn {sklearn_mean:.4}, linfa tree {linfa:.4}"
    );
    assert!(
        ours >= sklearn_mean - 0.02,
        "ours {ours} vs sklearn {sklearn_mean}"
    );
    assert!(ours >= linfa, "ours {ours} vs linfa-trees {linfa}");
}

/// Sanity check (not a reference comparison): the out-of-bag estimate should be near held-out
/// accuracy (Breiman 2001 reports OOB as roughly unbiased; scikit-learn's OOB on this split is
/// 0.945–0.953 vs 0.965–0.978 test, so the bound is a loose 5 points). Importances are
/// non-negative and sum to 1 by definition; probability rows sum to 1 within f32 rounding of 32
/// summed terms (1e-5).
#[test]
fn digits_oob_importances_and_probabilities_are_consistent() {
    let d = load_digits();
    let forest = fit_digits(&d, 0);
    let test_acc = accuracy(&forest.predict(&d.x_test), &d.y_test);
    let oob = forest
        .oob_accuracy()
        .expect("bootstrap forest has an OOB estimate");
    eprintln!("digits: OOB {oob:.4}, test {test_acc:.4}");
    assert!(
        (oob - test_acc).abs() <= 0.05,
        "OOB {oob} vs test {test_acc}"
    );

    let imp = forest.feature_importances();
    assert_eq!(imp.len(), N_FEATURES);
    assert!(imp.iter().all(|&v| v >= 0.0));
    assert!((imp.iter().sum::<f64>() - 1.0).abs() < 1e-9);
    // Corner pixel 0 is always blank in this data: it can never be split on.
    assert_eq!(imp[0], 0.0);

    let proba = forest.predict_proba(&d.x_test);
    assert_eq!(proba.len(), d.y_test.len() * N_CLASSES);
    for row in proba.chunks_exact(N_CLASSES) {
        assert!(row.iter().all(|&p| (0.0..=1.0).contains(&p)));
        assert!((row.iter().sum::<f32>() - 1.0).abs() < 1e-5);
    }
    let mut into = vec![f32::NAN; proba.len()];
    forest.predict_proba_into(&d.x_test, &mut into);
    assert_eq!(into, proba);
    assert_eq!(
        (forest.n_trees(), forest.n_classes(), forest.n_features()),
        (32, 10, 64)
    );

    let no_bootstrap = ForestConfig {
        bootstrap: false,
        n_trees: 2,
        ..ForestConfig::default()
    };
    let f =
        RandomForest::fit(&no_bootstrap, &d.x_train, N_FEATURES, &d.y_train, N_CLASSES).unwrap();
    assert_eq!(f.oob_accuracy(), None);
}

/// Same seed → identical bincode bytes with 1 and 2 rayon threads (project requirement).
/// More rows than digits so that both threads train trees and the OOB pass is split.
#[test]
fn fit_is_deterministic_across_thread_counts() {
    let n = 6000;
    let f = 12;
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let mut next = || {
        // xorshift64*: a fixed, dependency-free generator for the test data.
        state ^= state >> 12;
        state ^= state << 25;
        state ^= state >> 27;
        (state.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 40) as f32 / (1u64 << 24) as f32
    };
    let x: Vec<f32> = (0..n * f).map(|_| next()).collect();
    let y: Vec<u32> = (0..n)
        .map(|i| ((x[i * f] + x[i * f + 1] * 2.0 + next() * 0.5) * 1.5) as u32 % 4)
        .collect();
    let cfg = ForestConfig {
        n_trees: 8,
        seed: 42,
        ..ForestConfig::default()
    };
    let bytes_with = |threads: usize, cfg: &ForestConfig| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        let forest = pool.install(|| RandomForest::fit(cfg, &x, f, &y, 4).unwrap());
        bincode::serde::encode_to_vec(&forest, bincode::config::standard()).unwrap()
    };
    let one = bytes_with(1, &cfg);
    let two = bytes_with(2, &cfg);
    assert!(one == two, "model bytes differ between 1 and 2 threads");
    let other_seed = bytes_with(2, &ForestConfig { seed: 43, ..cfg });
    assert!(one != other_seed, "seed has no effect");
}

#[test]
fn bad_inputs_are_reported() {
    let cfg = ForestConfig::default();
    let x = [0.0f32, 1.0, 2.0, 3.0, 4.0, 5.0];
    let y = [0u32, 1, 0];
    let data_err = |r: grove::Result<RandomForest>, needle: &str| match r {
        Err(GroveError::Data(m)) => assert!(m.contains(needle), "{m}"),
        other => panic!("expected Data error containing {needle:?}, got {other:?}"),
    };
    let config_err = |r: grove::Result<RandomForest>| {
        assert!(matches!(r, Err(GroveError::Config(_))), "{r:?}");
    };

    let mut bad = x;
    bad[3] = f32::INFINITY;
    data_err(RandomForest::fit(&cfg, &bad, 2, &y, 2), "row 1, feature 1");
    bad[3] = f32::NAN;
    data_err(RandomForest::fit(&cfg, &bad, 2, &y, 2), "finite");
    data_err(
        RandomForest::fit(&cfg, &x, 2, &[0, 2, 1], 2),
        "label 2 of sample 1",
    );
    data_err(RandomForest::fit(&cfg, &x, 2, &[1, 1, 1], 2), "two classes");
    data_err(RandomForest::fit(&cfg, &x, 2, &[0, 1], 2), "labels");
    data_err(
        RandomForest::fit(&cfg, &[], 2, &[], 2),
        "no training samples",
    );
    config_err(RandomForest::fit(&cfg, &x, 2, &y, 1));
    config_err(RandomForest::fit(&cfg, &x, 0, &y, 2));
    for bad_cfg in [
        ForestConfig {
            n_trees: 0,
            ..cfg.clone()
        },
        ForestConfig {
            n_bins: 1,
            ..cfg.clone()
        },
        ForestConfig {
            n_bins: 257,
            ..cfg.clone()
        },
        ForestConfig {
            min_samples_leaf: 0,
            ..cfg.clone()
        },
        ForestConfig {
            max_depth: 0,
            ..cfg.clone()
        },
        ForestConfig {
            max_features: Some(3),
            ..cfg.clone()
        },
    ] {
        config_err(RandomForest::fit(&bad_cfg, &x, 2, &y, 2));
    }
}

//! grove's k-means against scikit-learn (committed fixture, made by
//! `tests/fixtures/kmeans/make_kmeans_fixture.py`; sklearn version recorded there) and against
//! linfa-clustering's KMeans (trained here), plus thread-count determinism.
//!
//! Tolerance 2% on inertia: k-means only finds a local optimum and each implementation draws
//! different k-means++ seeds, so results legitimately differ; with 10 restarts on the same
//! data the best inertias of sound implementations land close together. 2% is a rule of thumb
//! (not a published bound): loose enough for seed luck, tight enough to catch a broken update
//! step or a bad seeding, which cost far more than that on this data. For scale, the fixture
//! also records sklearn's own best-of-10 inertia for random_state 0..7: at k = 32 it ranges over
//! 43031–43895 (2.0%), and random_state = 0 happens to be sklearn's best (grove: +1.8%).
//! Measured here with sklearn (single restart, k = 32): random initialisation gave 47.7k–50.0k
//! against 43.4k–46.2k for k-means++, so a seeding or update bug would show well beyond 2%.

use grove::features::kmeans::{KMeans, KMeansConfig};
use linfa::prelude::*;
use linfa::DatasetBase;
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde_json::Value;

const REL_TOL: f64 = 0.02;

/// load_digits, standardised as in the fixture script (float64 population std, 1 for constant
/// columns, then float32).
fn digits() -> (Vec<f32>, usize) {
    let text = include_str!("fixtures/kmeans/digits.txt");
    let rows: Vec<Vec<f64>> = text
        .lines()
        .map(|l| l.chars().map(|c| c.to_digit(17).unwrap() as f64).collect())
        .collect();
    let (n, dim) = (rows.len(), rows[0].len());
    let mut out = vec![0.0f32; n * dim];
    for d in 0..dim {
        let mean = rows.iter().map(|r| r[d]).sum::<f64>() / n as f64;
        let var = rows.iter().map(|r| (r[d] - mean).powi(2)).sum::<f64>() / n as f64;
        let sd = if var == 0.0 { 1.0 } else { var.sqrt() };
        for (i, r) in rows.iter().enumerate() {
            out[i * dim + d] = ((r[d] - mean) / sd) as f32;
        }
    }
    (out, dim)
}

fn config(k: usize) -> KMeansConfig {
    // Same settings as sklearn's KMeans defaults used for the fixture (n_init=10, max_iter=300,
    // tol=1e-4 relative to the mean variance).
    KMeansConfig {
        k,
        max_iter: 300,
        tol: 1e-4,
        n_init: 10,
        seed: 0,
    }
}

/// Σ min_j ‖x − c_j‖², brute force in f64 (independent of the library's own inertia code).
fn brute_inertia(data: &[f32], dim: usize, centroids: &[f64]) -> f64 {
    data.chunks(dim)
        .map(|x| {
            centroids
                .chunks(dim)
                .map(|c| {
                    c.iter()
                        .zip(x)
                        .map(|(a, b)| (a - *b as f64).powi(2))
                        .sum::<f64>()
                })
                .fold(f64::INFINITY, f64::min)
        })
        .sum()
}

#[test]
fn inertia_within_two_percent_of_sklearn() {
    let fx: Value = serde_json::from_str(include_str!("fixtures/kmeans/kmeans.json")).unwrap();
    let (data, dim) = digits();
    assert_eq!(data.len() / dim, fx["n_samples"].as_u64().unwrap() as usize);
    let runs = fx["runs"].as_array().unwrap();
    assert!(!runs.is_empty());
    for run in runs {
        let k = run["k"].as_u64().unwrap() as usize;
        let want = run["inertia"].as_f64().unwrap();
        let km = KMeans::fit(&config(k), &data, dim).unwrap();
        let got = km.training_inertia();
        let centroids: Vec<f64> = km.centroids().iter().map(|&v| v as f64).collect();
        // Our reported inertia is the real one (f32 distances summed in f64: 1e-5 relative).
        let brute = brute_inertia(&data, dim, &centroids);
        assert!(
            (got - brute).abs() <= 1e-5 * brute,
            "k={k}: {got} vs brute {brute}"
        );
        let rel = (got - want) / want;
        println!("k={k}: grove {got:.1}, sklearn {want:.1}, relative {rel:+.4}");
        assert!(rel.abs() <= REL_TOL, "k={k}: grove {got} vs sklearn {want}");
    }
}

#[test]
fn inertia_within_two_percent_of_linfa() {
    let (data, dim) = digits();
    let n = data.len() / dim;
    let records =
        Array2::from_shape_vec((n, dim), data.iter().map(|&v| v as f64).collect()).unwrap();
    let dataset = DatasetBase::from(records);
    for k in [8, 32] {
        let linfa_model =
            linfa_clustering::KMeans::params_with_rng(k, ChaCha8Rng::seed_from_u64(0))
                .n_runs(10)
                .max_n_iterations(300)
                .tolerance(1e-4)
                .fit(&dataset)
                .unwrap();
        let linfa_centroids: Vec<f64> = linfa_model.centroids().iter().copied().collect();
        // linfa reports inertia averaged per sample and from the pre-update assignment, so
        // recompute it from its final centres.
        let want = brute_inertia(&data, dim, &linfa_centroids);
        let got = KMeans::fit(&config(k), &data, dim)
            .unwrap()
            .training_inertia();
        let rel = (got - want) / want;
        println!("k={k}: grove {got:.1}, linfa {want:.1}, relative {rel:+.4}");
        assert!(rel.abs() <= REL_TOL, "k={k}: grove {got} vs linfa {want}");
    }
}

#[test]
fn fit_is_identical_with_one_and_two_threads() {
    // 20k rows = many 1024-row chunks, so the ordered reduction is really exercised.
    let (n, dim) = (20_000, 10);
    let mut rng = ChaCha8Rng::seed_from_u64(9);
    let centres: Vec<f32> = (0..12 * dim).map(|_| rng.gen_range(-5.0f32..5.0)).collect();
    let data: Vec<f32> = (0..n)
        .flat_map(|i| {
            let c = (i * 7) % 12;
            centres[c * dim..(c + 1) * dim].to_vec()
        })
        .map(|v| v + rng.gen_range(-2.0f32..2.0))
        .collect();
    let cfg = KMeansConfig {
        k: 16,
        n_init: 2,
        seed: 3,
        ..Default::default()
    };
    let fit_with = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| KMeans::fit(&cfg, &data, dim).unwrap())
    };
    let (one, two) = (fit_with(1), fit_with(2));
    assert_eq!(one.centroids(), two.centroids());
    assert_eq!(
        one.training_inertia().to_bits(),
        two.training_inertia().to_bits()
    );
    assert_eq!(one.assign(&data), two.assign(&data));
}

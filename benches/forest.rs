//! Forest training and prediction speed on synthetic data shaped like a segmentation job:
//! 200k sampled pixels × 40 features, 5 classes, 32 trees (the DESIGN.md reference figures:
//! 1.7 s training and 2.2 s for predicting 1M rows on 2 cores).

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion};
use grove::forest::{ForestConfig, RandomForest};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const N_FEATURES: usize = 40;
const N_CLASSES: usize = 5;

/// Uniform features in [-1, 1); class = argmax over 5 fixed random linear scores of the first
/// 10 features plus uniform noise, so there is signal but the classes overlap.
fn synthetic(n_rows: usize, seed: u64) -> (Vec<f32>, Vec<u32>) {
    let mut weights_rng = ChaCha8Rng::seed_from_u64(1);
    let w: Vec<f32> = (0..N_CLASSES * 10)
        .map(|_| weights_rng.gen_range(-1.0..1.0))
        .collect();
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let x: Vec<f32> = (0..n_rows * N_FEATURES)
        .map(|_| rng.gen_range(-1.0..1.0))
        .collect();
    let y = x
        .chunks_exact(N_FEATURES)
        .map(|row| {
            let scores = (0..N_CLASSES).map(|k| {
                let s: f32 = (0..10).map(|j| w[k * 10 + j] * row[j]).sum();
                s + rng.gen_range(0.0..0.5f32)
            });
            scores
                .enumerate()
                .fold((0, f32::MIN), |b, (k, s)| if s > b.1 { (k, s) } else { b })
                .0 as u32
        })
        .collect();
    (x, y)
}

fn forest(c: &mut Criterion) {
    let (x, y) = synthetic(200_000, 7);
    let cfg = ForestConfig::default();
    let mut group = c.benchmark_group("forest");
    group
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(15));
    group.bench_function("fit_32_trees_200k_x_40", |b| {
        b.iter(|| RandomForest::fit(&cfg, &x, N_FEATURES, &y, N_CLASSES).unwrap())
    });

    let model = RandomForest::fit(&cfg, &x, N_FEATURES, &y, N_CLASSES).unwrap();
    let (x_new, y_new) = synthetic(1_000_000, 8);
    let accuracy = model
        .predict(&x_new)
        .iter()
        .zip(&y_new)
        .filter(|(a, b)| a == b)
        .count() as f64
        / y_new.len() as f64;
    eprintln!(
        "held-out accuracy {accuracy:.4}, OOB {:.4}",
        model.oob_accuracy().unwrap_or(f64::NAN)
    );
    let mut out = vec![0.0f32; 1_000_000 * N_CLASSES];
    group.bench_function("predict_proba_1m_rows", |b| {
        b.iter(|| model.predict_proba_into(&x_new, &mut out))
    });
    group.finish();
}

criterion_group!(benches, forest);
criterion_main!(benches);

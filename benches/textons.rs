//! Texton stage timings: assignment of a 512×512 image with 44 response planes to k = 32
//! textons, texton histograms (k = 32, window 15) on 512×512, and a k-means fit on 60k × 44
//! rows with k = 32 (one restart; the default runs 3).

use criterion::{criterion_group, criterion_main, Criterion};
use grove::features::kmeans::{KMeans, KMeansConfig};
use grove::features::textons::{texton_histograms, TextonDictionary};
use grove::Plane;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const SIDE: usize = 512;
const DIM: usize = 44;
const K: usize = 32;

/// Clustered synthetic responses: each row is one of 48 random prototypes plus noise, so
/// k-means has structure to find (uniform noise would converge unrealistically slowly).
fn rows(n: usize, rng: &mut ChaCha8Rng) -> Vec<f32> {
    let protos: Vec<f32> = (0..48 * DIM).map(|_| rng.gen_range(-3.0f32..3.0)).collect();
    let mut out = Vec::with_capacity(n * DIM);
    for _ in 0..n {
        let p = rng.gen_range(0..48);
        for &v in &protos[p * DIM..(p + 1) * DIM] {
            out.push(v + rng.gen_range(-1.0f32..1.0));
        }
    }
    out
}

fn benches(c: &mut Criterion) {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let samples = rows(60_000, &mut rng);
    let fit_cfg = KMeansConfig {
        k: K,
        n_init: 1,
        ..Default::default()
    };
    let dict = TextonDictionary::fit(&samples[..20_000 * DIM], DIM, &fit_cfg).unwrap();
    let pixels = rows(SIDE * SIDE, &mut rng);
    let planes: Vec<Plane> = (0..DIM)
        .map(|d| {
            let data = pixels.iter().skip(d).step_by(DIM).copied().collect();
            Plane::from_vec(SIDE, SIDE, data)
        })
        .collect();
    drop(pixels);
    let map = dict.assign_planes(&planes);

    let mut g = c.benchmark_group("textons");
    g.sample_size(10);
    g.bench_function("assign_512x512_44d_k32", |b| {
        b.iter(|| dict.assign_planes(&planes))
    });
    g.bench_function("histograms_512x512_k32_w15", |b| {
        b.iter(|| texton_histograms(&map, SIDE, SIDE, K, 15).unwrap())
    });
    g.bench_function("kmeans_fit_60000x44_k32", |b| {
        b.iter(|| KMeans::fit(&fit_cfg, &samples, DIM).unwrap())
    });
    g.finish();
}

criterion_group!(textons, benches);
criterion_main!(textons);

//! Filter-bank throughput on 512×512 inputs: the Gaussian and the full derivative set per
//! scale, the sRGB → Lab conversion, and the whole default bank (σ = 1, 2, 4, 8) on an RGB image.
//! Criterion reports time per iteration; divide by 262 144 pixels for ns/pixel.

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use grove::features::bank::{filter_bank, FilterBankConfig};
use grove::features::color::lab_planes;
use grove::features::gaussian::{derivatives, gaussian};
use grove::Plane;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const SIDE: usize = 512;

fn random_plane(rng: &mut ChaCha8Rng) -> Plane {
    // 8-bit sRGB values, as decoded from a PNG.
    let data = (0..SIDE * SIDE)
        .map(|_| f32::from(rng.gen::<u8>()) / 255.0)
        .collect();
    Plane::from_vec(SIDE, SIDE, data)
}

fn bench(c: &mut Criterion) {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let rgb = [
        random_plane(&mut rng),
        random_plane(&mut rng),
        random_plane(&mut rng),
    ];
    let lab = lab_planes(&rgb);
    let mut g = c.benchmark_group("filters_512");
    g.sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(3))
        .throughput(Throughput::Elements((SIDE * SIDE) as u64));
    for sigma in [1.0f32, 2.0, 4.0, 8.0] {
        g.bench_function(format!("gaussian_s{sigma}"), |b| {
            b.iter(|| gaussian(&lab[0], sigma))
        });
        g.bench_function(format!("derivatives_s{sigma}"), |b| {
            b.iter(|| derivatives(&lab[0], sigma))
        });
    }
    g.bench_function("srgb_to_lab_rgb", |b| b.iter(|| lab_planes(&rgb)));
    let cfg = FilterBankConfig::default();
    g.bench_function("bank_default_rgb", |b| b.iter(|| filter_bank(&lab, &cfg)));
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);

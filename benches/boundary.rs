//! Boundary F1 on one 512×512 five-class map (blocky regions, 10 % speckle in the
//! prediction, 2 % unlabelled): grove's disc scan over boundary pixels against the
//! distance-transform formulation on imageproc's Euclidean distance transform (one per class
//! and side, plus one for the unlabelled mask). This measurement is why grove keeps the scan.

use criterion::{criterion_group, criterion_main, Criterion};
use grove::eval::BoundaryCounts;

#[path = "../tests/support/boundary_edt.rs"]
mod boundary_edt;

const SIDE: usize = 512;
const K: usize = 5;

fn benches(c: &mut Criterion) {
    let (truth, pred) = boundary_edt::random_pair(1, SIDE, SIDE, K, 24, 0.1, 0.02);
    let mut g = c.benchmark_group("boundary_f1_512x512_5_classes");
    g.bench_function("disc_scan", |b| {
        b.iter(|| {
            let mut counts = BoundaryCounts::new(K, 2.0).unwrap();
            counts.add(SIDE, SIDE, &truth, &pred, 255).unwrap();
            counts
        })
    });
    g.bench_function("imageproc_distance_transform", |b| {
        b.iter(|| boundary_edt::reference_counts(SIDE, SIDE, &truth, &pred, 255, K, 2.0))
    });
    g.finish();
}

criterion_group!(benches_group, benches);
criterion_main!(benches_group);

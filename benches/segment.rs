//! End to end per image: `Segmenter::predict_proba` on one 512 × 512 demo scene with the default
//! model plus position features (78 features, 32 textons, 32 trees, as in the README table), split into features and forest, so a change in
//! either shows up in the number that `apply` users feel.

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use grove::dataset::Dataset;
use grove::imageio::read_image;
use grove::segmenter::TrainConfig;

fn bench(c: &mut Criterion) {
    let dir = tempfile::tempdir().unwrap();
    grove::demo::write_demo_dataset(dir.path(), 0..5, 512, 7).unwrap();
    let ds = Dataset::open(dir.path(), Default::default()).unwrap();
    let (train, test) = ds.entries.split_at(4);
    let train: Vec<_> = train.iter().collect();
    let mut cfg = TrainConfig::default();
    cfg.features.position = true;
    let model = cfg.fit(&ds, &train, Default::default()).unwrap();
    let image = read_image(&test[0].image).unwrap();
    let stack = model.features.features(&image);
    let rows = stack.gather_rows(&(0..(512 * 512) as u32).collect::<Vec<_>>());

    let mut g = c.benchmark_group("segment_512");
    g.sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5))
        .throughput(Throughput::Elements(512 * 512));
    g.bench_function("features", |b| b.iter(|| model.features.features(&image)));
    g.bench_function("forest", |b| b.iter(|| model.forest.predict_proba(&rows)));
    g.bench_function("predict_proba", |b| b.iter(|| model.predict_proba(&image)));
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);

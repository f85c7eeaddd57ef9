//! Smoothing on a demo-like problem (see `support/demo_map.rs`: the default model's
//! probabilities on a 1024² demo scene, 5 classes): the grid max-flow alone on a 512² binary
//! cut, alpha-expansion and 5 mean-field iterations per megapixel (each including the energy's
//! construction from the probabilities and Lab planes, as `smooth` does it).

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use grove::smooth::energy::contrast_weights;
use grove::smooth::maxflow::GridMaxFlow;
use grove::smooth::{contrast_beta, smooth, Connectivity, SmoothMethod, SmoothSettings};
use grove::Plane;

#[path = "support/demo_map.rs"]
mod demo_map;

/// A binary cut on the top-left `size²` of the map: "class `c`" against "any other class",
/// unary `−ln p` scaled by 1000, the default contrast weights scaled alike.
fn binary_graph(map: &demo_map::DemoMap, size: usize, class: usize) -> GridMaxFlow {
    let (w, n) = (map.probs.width, map.probs.n_classes);
    let crop = |p: &Plane| {
        let data = (0..size * size)
            .map(|i| p.data[(i / size) * w + i % size])
            .collect();
        Plane::from_vec(size, size, data)
    };
    let lab: Vec<Plane> = map.lab.iter().map(crop).collect();
    let strength = SmoothSettings::default().strength;
    let weights = contrast_weights(&lab, strength, contrast_beta(&lab));
    let mut g = GridMaxFlow::new(size, size, Connectivity::Eight);
    let cost = |p: f32| (-p.max(1e-4).ln() * 1000.0).round() as i32;
    for y in 0..size {
        for x in 0..size {
            let pc = map.probs.data[(y * w + x) * n + class];
            // Sink side = class c: the source t-link is the cost of being class c.
            g.add_terminal(x, y, cost(pc), cost(1.0 - pc));
            for (k, &dir) in [0usize, 2, 4, 6].iter().enumerate() {
                let wt = weights[(y * size + x) * 4 + k];
                if wt > 0.0 {
                    let c = (wt * 1000.0).round() as i32;
                    g.add_edge(x, y, dir, c, c);
                }
            }
        }
    }
    g
}

fn bench(c: &mut Criterion) {
    let map = demo_map::demo_map(1024);
    let pixels = (map.probs.width * map.probs.height) as u64;

    let mut g = c.benchmark_group("smooth_maxflow_512");
    g.sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5))
        .throughput(Throughput::Elements(512 * 512));
    for class in [0, 2] {
        let graph = binary_graph(&map, 512, class);
        g.bench_function(format!("bk_class{class}"), |b| {
            b.iter_batched(
                || graph.clone(),
                |mut g| g.max_flow(),
                criterion::BatchSize::LargeInput,
            )
        });
    }
    g.finish();

    let mut g = c.benchmark_group("smooth_1mp_5classes");
    g.sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(8))
        .throughput(Throughput::Elements(pixels));
    for method in [SmoothMethod::Expansion, SmoothMethod::MeanField] {
        let settings = SmoothSettings {
            method,
            meanfield_iterations: 5,
            ..Default::default()
        };
        g.bench_function(method.name(), |b| {
            b.iter(|| smooth(&map.probs, &map.lab, &settings, None))
        });
    }
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);

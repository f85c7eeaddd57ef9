//! How far do images move from the training profile (`eval::drift`) — the measurement behind
//! `DRIFT_Z`. Prints a Markdown table (the one in the README). Trains the demo model, then prints the largest per-feature |z| of held-out
//! scenes as they are and after changes a user meets (lighting, focus, scale), and of the
//! real MRI slices (`tests/data/mni152-tissue`, another domain entirely).
//!
//! `cargo bench --bench drift`

use std::path::Path;

use grove::dataset::{Dataset, LabelOptions};
use grove::eval::drift::{drift_score, DRIFT_Z};
use grove::imageio::{read_image, RasterImage};
use grove::plane::Plane;
use grove::progress::Progress;
use grove::segmenter::{Segmenter, TrainConfig};
use grove::tiling::predict_tiled_moments;

fn map(img: &RasterImage, f: impl Fn(f32) -> f32) -> RasterImage {
    let mut out = img.clone();
    out.channels
        .iter_mut()
        .for_each(|p| p.data.iter_mut().for_each(|v| *v = f(*v).clamp(0.0, 1.0)));
    out
}

/// Every second pixel in each direction (a 2x coarser pixel scale).
fn halve(img: &RasterImage) -> RasterImage {
    let (w, h) = (img.width / 2, img.height / 2);
    let channels = img
        .channels
        .iter()
        .map(|p| {
            let mut q = Plane::filled(w, h, 0.0);
            for y in 0..h {
                for x in 0..w {
                    q.data[y * w + x] = p.data[2 * y * img.width + 2 * x];
                }
            }
            q
        })
        .collect();
    RasterImage {
        width: w,
        height: h,
        channels,
    }
}

/// 3x3 box blur, twice (out of focus).
fn blur(img: &RasterImage) -> RasterImage {
    let mut cur = img.clone();
    for _ in 0..2 {
        let prev = cur.clone();
        let (w, h) = (img.width, img.height);
        for (c, p) in cur.channels.iter_mut().enumerate() {
            let src = &prev.channels[c].data;
            for y in 0..h {
                for x in 0..w {
                    let mut s = 0.0;
                    for dy in -1i32..=1 {
                        for dx in -1i32..=1 {
                            let yy = (y as i32 + dy).clamp(0, h as i32 - 1) as usize;
                            let xx = (x as i32 + dx).clamp(0, w as i32 - 1) as usize;
                            s += src[yy * w + xx];
                        }
                    }
                    p.data[y * w + x] = s / 9.0;
                }
            }
        }
    }
    cur
}

/// The drift score (`eval::drift::drift_score`) of an image.
fn score(model: &Segmenter, img: &RasterImage) -> f64 {
    let img = if model.features.channels == 3 {
        img.to_rgb()
    } else {
        img.clone()
    };
    let (_, m) = predict_tiled_moments(model, &img, 0);
    drift_score(&model.profile.as_ref().expect("new model").z_scores(&m))
}

fn show(name: &str, mut v: Vec<f64>, limit: f64) {
    v.sort_by(f64::total_cmp);
    let flagged = v.iter().filter(|&&s| s > limit).count();
    println!(
        "| {name} | {:.2} | {:.2} | {:.2} | {flagged} of {} |",
        v[0],
        v[v.len() / 2],
        v[v.len() - 1],
        v.len()
    );
}

fn main() {
    let tmp = tempfile::tempdir().unwrap();
    let (train, test) = (tmp.path().join("train"), tmp.path().join("test"));
    grove::demo::write_demo_dataset(&train, 0..14, 384, 7).unwrap();
    grove::demo::write_demo_dataset(&test, 14..20, 384, 7).unwrap();
    let ds = Dataset::open(&train, LabelOptions::default()).unwrap();
    let model = TrainConfig::default()
        .fit(&ds, &ds.labelled(), Progress::new(false))
        .unwrap();
    let tests: Vec<RasterImage> = std::fs::read_dir(test.join("images"))
        .unwrap()
        .map(|e| read_image(&e.unwrap().path()).unwrap())
        .collect();
    type Change = (&'static str, Box<dyn Fn(&RasterImage) -> RasterImage>);
    let changes: Vec<Change> = vec![
        ("as generated", Box::new(|i| i.clone())),
        ("10 % darker", Box::new(|i| map(i, |v| v * 0.9))),
        ("30 % darker", Box::new(|i| map(i, |v| v * 0.7))),
        ("30 % brighter", Box::new(|i| map(i, |v| v * 1.3))),
        (
            "lower contrast",
            Box::new(|i| map(i, |v| 0.5 + (v - 0.5) * 0.6)),
        ),
        ("blurred", Box::new(blur)),
        ("2x coarser pixels", Box::new(halve)),
    ];
    let limit = model.profile.as_ref().expect("new model").limit as f64;
    println!("the model's limit: {limit:.2} (at least {DRIFT_Z})");
    let own: Vec<RasterImage> = std::fs::read_dir(train.join("images"))
        .unwrap()
        .map(|e| read_image(&e.unwrap().path()).unwrap())
        .collect();
    println!("| images | drift score min | median | max | flagged (> {limit:.2}) |");
    println!("|---|---:|---:|---:|---:|");
    for (name, f) in &changes {
        show(
            name,
            tests.iter().map(|i| score(&model, &f(i))).collect(),
            limit,
        );
    }
    show(
        "training scenes themselves",
        own.iter().map(|i| score(&model, i)).collect(),
        limit,
    );
    let mri = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/mni152-tissue/images");
    if let Ok(dir) = std::fs::read_dir(&mri) {
        let zs = dir
            .map(|e| score(&model, &read_image(&e.unwrap().path()).unwrap()))
            .collect();
        show("MRI slices (another domain)", zs, limit);
    }
}

//! Does labelling where `grove suggest` points pay off? And which uncertainty score flags
//! wrong pixels best?
//!
//! `cargo bench --bench active_learning` runs the active-learning experiment on the demo
//! scenes: scribbles (a few strokes per class, drawn from the ground truth) on 3 of a pool of
//! images; each round adds a fixed budget of ground-truth pixels, either where `suggest`
//! points (its regions, most unsure pixels first) or in random square patches anywhere in the
//! pool; retrain, score the hold-out. 5 seeds. Writes `target/active_learning/{results.csv,
//! active_learning.svg}` and prints the comparison.
//!
//! `cargo bench --bench active_learning -- --measure` prints the AUROC of each uncertainty
//! score for wrong vs right pixels (demo hold-out and `tests/data/mni152-tissue`, scribble-
//! trained models), the measurement behind `eval::uncertainty::unsureness`.

use std::path::{Path, PathBuf};

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use grove::dataset::{ClassTable, Dataset, LabelOptions, UNLABELLED};
use grove::eval::confusion::ConfusionMatrix;
use grove::eval::suggest::{suggest_image, SuggestConfig};
use grove::eval::uncertainty::{auroc, margin, normalised_entropy};
use grove::imageio::{write_grey_png, write_label_png, write_rgb_png, RasterImage};
use grove::progress::Progress;
use grove::segmenter::{Segmenter, TrainConfig};

/// An image with a class index per pixel (its ground truth).
struct Scene {
    name: String,
    image: RasterImage,
    truth: Vec<u8>,
}

fn demo_scenes(seed: u64, range: std::ops::Range<u32>, size: usize) -> Vec<Scene> {
    let table = demo_table();
    range
        .map(|i| {
            let s = grove::demo::render_scene(seed, i, size, size);
            let plane = |k: usize| {
                grove::plane::Plane::from_vec(
                    size,
                    size,
                    s.rgb
                        .iter()
                        .skip(k)
                        .step_by(3)
                        .map(|&v| v as f32 / 255.0)
                        .collect(),
                )
            };
            Scene {
                name: format!("farm_{i:03}"),
                image: RasterImage {
                    width: size,
                    height: size,
                    channels: vec![plane(0), plane(1), plane(2)],
                },
                truth: s
                    .labels
                    .iter()
                    .map(|&id| table.index_of_id(id).unwrap() as u8)
                    .collect(),
            }
        })
        .collect()
}

fn demo_table() -> ClassTable {
    ClassTable::parse(grove::demo::DEMO_CLASSES_TOML, 255).unwrap()
}

fn mni_scenes() -> (ClassTable, Vec<Scene>) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/mni152-tissue");
    let ds = Dataset::open(&root, LabelOptions::default()).unwrap();
    let scenes = ds
        .labelled()
        .iter()
        .map(|e| {
            let (image, labels) = ds.load_pair(e).unwrap();
            Scene {
                name: e.stem.clone(),
                image,
                truth: labels.indices,
            }
        })
        .collect();
    (ds.classes.clone(), scenes)
}

/// A few straight strokes per class (3 px wide, a sixth of the image side long), centred on
/// random pixels of the class and kept only where the truth is that class, as a user would
/// scribble inside regions.
fn scribbles(s: &Scene, n_classes: usize, strokes: usize, rng: &mut ChaCha8Rng) -> Vec<u8> {
    let (w, h) = (s.image.width, s.image.height);
    let mut out = vec![UNLABELLED; w * h];
    let len = (w.min(h) / 6) as i64;
    for c in 0..n_classes as u8 {
        let pixels: Vec<usize> = (0..w * h).filter(|&p| s.truth[p] == c).collect();
        if pixels.is_empty() {
            continue;
        }
        for _ in 0..strokes {
            let p = pixels[rng.gen_range(0..pixels.len())];
            let (x0, y0) = ((p % w) as f64, (p / w) as f64);
            let a: f64 = rng.gen_range(0.0..std::f64::consts::PI);
            for t in -len / 2..=len / 2 {
                for (dx, dy) in [(0, 0), (1, 0), (-1, 0), (0, 1), (0, -1)] {
                    let x = (x0 + t as f64 * a.cos()).round() as i64 + dx;
                    let y = (y0 + t as f64 * a.sin()).round() as i64 + dy;
                    if x >= 0 && y >= 0 && (x as usize) < w && (y as usize) < h {
                        let q = y as usize * w + x as usize;
                        if s.truth[q] == c {
                            out[q] = c;
                        }
                    }
                }
            }
        }
    }
    out
}

/// Writes the pool as a dataset (labels only for images with any labelled pixel) and trains.
fn train(
    dir: &Path,
    table: &ClassTable,
    pool: &[Scene],
    labels: &[Vec<u8>],
    seed: u64,
) -> Segmenter {
    let _ = std::fs::remove_dir_all(dir);
    std::fs::create_dir_all(dir.join("images")).unwrap();
    std::fs::write(dir.join("classes.toml"), table.to_toml()).unwrap();
    let pal = table.palette();
    for (s, l) in pool.iter().zip(labels) {
        let img = dir.join("images").join(format!("{}.png", s.name));
        let (w, h) = (s.image.width, s.image.height);
        if s.image.is_grey() {
            let g: Vec<u8> = s.image.channels[0]
                .data
                .iter()
                .map(|v| (v * 255.0).round() as u8)
                .collect();
            write_grey_png(&img, w, h, &g).unwrap();
        } else {
            write_rgb_png(&img, w, h, &s.image.to_rgb8()).unwrap();
        }
        if l.iter().any(|&c| c != UNLABELLED) {
            let ids: Vec<u8> = l
                .iter()
                .map(|&c| {
                    if c == UNLABELLED {
                        255
                    } else {
                        table.classes()[c as usize].id
                    }
                })
                .collect();
            write_label_png(
                &dir.join("labels").join(format!("{}.png", s.name)),
                w,
                h,
                &ids,
                &pal,
            )
            .unwrap();
        }
    }
    let ds = Dataset::open(dir, LabelOptions::default()).unwrap();
    let mut cfg = TrainConfig {
        seed,
        ..TrainConfig::default()
    };
    cfg.forest.n_trees = 16;
    cfg.features.textons = 16;
    cfg.fit(&ds, &ds.labelled(), Progress::new(false)).unwrap()
}

fn mean_iou(model: &Segmenter, holdout: &[Scene]) -> f64 {
    let mut cm = ConfusionMatrix::new(model.classes.len());
    for s in holdout {
        let pred = model.predict_proba(&s.image).argmax();
        cm.add(&s.truth, &pred, Some(UNLABELLED as u32)).unwrap();
    }
    cm.mean_iou().unwrap()
}

/// Euclidean distance of every pixel to the nearest labelled one (brute force over a
/// subsample of stroke pixels is enough for a measurement).
fn distance_to_strokes(labels: &[u8], w: usize) -> Vec<f32> {
    let strokes: Vec<(f32, f32)> = labels
        .iter()
        .enumerate()
        .filter(|(_, &c)| c != UNLABELLED)
        .map(|(p, _)| ((p % w) as f32, (p / w) as f32))
        .step_by(3)
        .collect();
    (0..labels.len())
        .map(|p| {
            let (x, y) = ((p % w) as f32, (p / w) as f32);
            strokes
                .iter()
                .map(|&(sx, sy)| (sx - x).powi(2) + (sy - y).powi(2))
                .fold(f32::INFINITY, f32::min)
                .sqrt()
        })
        .collect()
}

const SCORES: [&str; 5] = [
    "1 - p1",
    "1 - margin",
    "entropy",
    "tree disagreement",
    "distance to strokes",
];

/// Scores per pixel (higher = more unsure) and whether the prediction is wrong.
fn score_pixels(
    model: &Segmenter,
    s: &Scene,
    known: Option<&[u8]>,
    acc: &mut [(Vec<f32>, Vec<bool>); 5],
) {
    let probs = model.predict_proba(&s.image);
    let votes = model.predict_votes(&s.image);
    let k = probs.n_classes;
    let dist = known.map(|l| {
        let d = distance_to_strokes(l, s.image.width);
        let max = d.iter().copied().fold(1.0, f32::max);
        d.into_iter().map(|v| v / max).collect::<Vec<_>>()
    });
    for p in 0..s.truth.len() {
        if s.truth[p] == UNLABELLED || known.is_some_and(|l| l[p] != UNLABELLED) {
            continue;
        }
        let pr = &probs.data[p * k..(p + 1) * k];
        let wrong = grove::forest::argmax(pr) as u8 != s.truth[p];
        let vote = votes.data[p * k..(p + 1) * k]
            .iter()
            .copied()
            .fold(0.0, f32::max);
        let mut scores = vec![
            1.0 - pr.iter().copied().fold(0.0, f32::max),
            1.0 - margin(pr),
            normalised_entropy(pr),
            1.0 - vote,
        ];
        if let Some(d) = &dist {
            scores.push(d[p]);
        }
        for (i, v) in scores.into_iter().enumerate() {
            acc[i].0.push(v);
            acc[i].1.push(wrong);
        }
    }
}

fn measure() {
    let work = scratch("measure");
    let print = |title: &str, acc: &[(Vec<f32>, Vec<bool>); 5]| {
        let wrong = acc[0].1.iter().filter(|&&w| w).count();
        print!(
            "{title:<34} {:>6.3} % wrong |",
            100.0 * wrong as f64 / acc[0].1.len() as f64
        );
        for (name, (s, w)) in SCORES.iter().zip(acc) {
            if let Some(a) = auroc(s, w) {
                print!(" {name} {a:.3} |");
            }
        }
        println!();
    };
    let table = demo_table();
    let (mut hold, mut train_px) = (empty(), empty());
    for seed in 0..5u64 {
        let pool = demo_scenes(seed, 0..3, 192);
        let holdout = demo_scenes(seed, 10..15, 192);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let labels: Vec<Vec<u8>> = pool
            .iter()
            .map(|s| scribbles(s, table.len(), 3, &mut rng))
            .collect();
        let model = train(&work, &table, &pool, &labels, seed);
        holdout
            .iter()
            .for_each(|s| score_pixels(&model, s, None, &mut hold));
        pool.iter()
            .zip(&labels)
            .for_each(|(s, l)| score_pixels(&model, s, Some(l), &mut train_px));
    }
    print("demo hold-out (5 seeds x 5 scenes)", &hold);
    print("demo unlabelled pixels of scribbled", &train_px);
    let (table, scenes) = mni_scenes();
    let (mut hold, mut train_px) = (empty(), empty());
    let n = scenes.len();
    let (pool, holdout) = scenes.split_at(n - 4);
    let pool: Vec<Scene> = pool.iter().step_by(4).map(clone_scene).collect();
    let mut rng = ChaCha8Rng::seed_from_u64(0);
    let labels: Vec<Vec<u8>> = pool
        .iter()
        .map(|s| scribbles(s, table.len(), 3, &mut rng))
        .collect();
    let model = train(&work, &table, &pool, &labels, 0);
    holdout
        .iter()
        .for_each(|s| score_pixels(&model, s, None, &mut hold));
    pool.iter()
        .zip(&labels)
        .for_each(|(s, l)| score_pixels(&model, s, Some(l), &mut train_px));
    print("mni152 hold-out (4 slices)", &hold);
    print("mni152 unlabelled pixels of scribbled", &train_px);
}

fn empty() -> [(Vec<f32>, Vec<bool>); 5] {
    Default::default()
}

fn clone_scene(s: &Scene) -> Scene {
    Scene {
        name: s.name.clone(),
        image: s.image.clone(),
        truth: s.truth.clone(),
    }
}

fn scratch(name: &str) -> PathBuf {
    let d = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("target/active_learning")
        .join(name);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if args.iter().any(|a| a == "--measure") {
        measure();
    } else {
        experiment();
    }
}

fn experiment() {
    let _ = (suggest_image, SuggestConfig::default());
    todo!()
}

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

const ROUNDS: usize = 6;
const BUDGET: usize = 1500;
const PATCH: usize = 16;
const SEEDS: u64 = 5;

/// One measurement: strategy, seed, round, labelled pixels in the pool, hold-out mean IoU.
struct Point {
    strategy: &'static str,
    seed: u64,
    round: usize,
    labelled: usize,
    miou: f64,
}

/// Adds up to `BUDGET` ground-truth pixels where `suggest` points: regions of all pool
/// images ranked together by their score, most unsure pixels first, at most a quarter of the
/// budget per region on the first pass.
fn add_suggested(model: &Segmenter, pool: &[Scene], labels: &mut [Vec<u8>]) {
    let names = model.classes.names();
    let mut regions = Vec::new();
    for (i, s) in pool.iter().enumerate() {
        let probs = model.predict_proba(&s.image);
        let known: Vec<bool> = labels[i].iter().map(|&c| c != UNLABELLED).collect();
        let sug = suggest_image(
            &s.name,
            &probs,
            Some(&known),
            &names,
            &SuggestConfig::default(),
        );
        regions.extend(sug.regions.into_iter().map(|r| (i, r)));
    }
    regions.sort_by(|a, b| b.1.score.total_cmp(&a.1.score));
    let mut left = BUDGET;
    for cap in [BUDGET / 4, BUDGET] {
        for (i, r) in &regions {
            let mut taken = 0;
            for &p in &r.members {
                if left == 0 || taken == cap {
                    break;
                }
                if labels[*i][p as usize] == UNLABELLED {
                    labels[*i][p as usize] = pool[*i].truth[p as usize];
                    taken += 1;
                    left -= 1;
                }
            }
        }
    }
}

/// Adds `BUDGET` ground-truth pixels in random `PATCH`² squares anywhere in the pool.
fn add_random(pool: &[Scene], labels: &mut [Vec<u8>], rng: &mut ChaCha8Rng) {
    let mut left = BUDGET;
    let mut tries = 0;
    while left > 0 && tries < 10_000 {
        tries += 1;
        let i = rng.gen_range(0..pool.len());
        let (w, h) = (pool[i].image.width, pool[i].image.height);
        let (x0, y0) = (rng.gen_range(0..w - PATCH), rng.gen_range(0..h - PATCH));
        for y in y0..y0 + PATCH {
            for x in x0..x0 + PATCH {
                let p = y * w + x;
                if left > 0 && labels[i][p] == UNLABELLED {
                    labels[i][p] = pool[i].truth[p];
                    left -= 1;
                }
            }
        }
    }
}

fn experiment() {
    let table = demo_table();
    let work = scratch("experiment");
    let mut points = Vec::new();
    for seed in 0..SEEDS {
        let pool = demo_scenes(100 + seed, 0..10, 192);
        let holdout = demo_scenes(100 + seed, 10..15, 192);
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let start: Vec<Vec<u8>> = pool
            .iter()
            .enumerate()
            .map(|(i, s)| {
                if i < 3 {
                    scribbles(s, table.len(), 3, &mut rng)
                } else {
                    vec![UNLABELLED; s.truth.len()]
                }
            })
            .collect();
        for strategy in ["suggest", "random"] {
            let mut labels = start.clone();
            let mut rng = ChaCha8Rng::seed_from_u64(1000 + seed);
            for round in 0..=ROUNDS {
                let model = train(&work, &table, &pool, &labels, seed);
                let labelled = labels
                    .iter()
                    .flatten()
                    .filter(|&&c| c != UNLABELLED)
                    .count();
                let miou = mean_iou(&model, &holdout);
                eprintln!("seed {seed} {strategy:<7} round {round}: {labelled:>6} px labelled, hold-out mean IoU {miou:.4}");
                points.push(Point {
                    strategy,
                    seed,
                    round,
                    labelled,
                    miou,
                });
                if round < ROUNDS {
                    match strategy {
                        "suggest" => add_suggested(&model, &pool, &mut labels),
                        _ => add_random(&pool, &mut labels, &mut rng),
                    }
                }
            }
        }
    }
    let out = scratch("");
    let mut csv = String::from("strategy,seed,round,labelled_pixels,mean_iou\n");
    for p in &points {
        csv += &format!(
            "{},{},{},{},{:.4}\n",
            p.strategy, p.seed, p.round, p.labelled, p.miou
        );
    }
    std::fs::write(out.join("results.csv"), csv).unwrap();
    let mean = |strategy: &str, round: usize| {
        let v: Vec<&Point> = points
            .iter()
            .filter(|p| p.strategy == strategy && p.round == round)
            .collect();
        let n = v.len() as f64;
        let m = v.iter().map(|p| p.miou).sum::<f64>() / n;
        let sd = (v.iter().map(|p| (p.miou - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        (v.iter().map(|p| p.labelled as f64).sum::<f64>() / n, m, sd)
    };
    println!("round | suggest: labelled px, mean IoU ± sd | random: labelled px, mean IoU ± sd");
    for r in 0..=ROUNDS {
        let (a, b) = (mean("suggest", r), mean("random", r));
        println!(
            "{r:>5} | {:>8.0} {:.4} ± {:.4} | {:>8.0} {:.4} ± {:.4}",
            a.0, a.1, a.2, b.0, b.1, b.2
        );
    }
    let (rand_px, rand_final, _) = mean("random", ROUNDS);
    match (0..=ROUNDS).find(|&r| mean("suggest", r).1 >= rand_final) {
        Some(r) => {
            let px = mean("suggest", r).0;
            println!(
                "suggest reaches random's final mean IoU {rand_final:.4} ({rand_px:.0} px) at round {r} with {px:.0} px: {:.0} % of random's labelled pixels ({} of the bar of at most 50 %)",
                100.0 * px / rand_px,
                if px <= 0.5 * rand_px { "meets" } else { "misses" }
            );
        }
        None => println!(
            "suggest does not reach random's final mean IoU {rand_final:.4} within {ROUNDS} rounds (its final: {:.4})",
            mean("suggest", ROUNDS).1
        ),
    }
    std::fs::write(out.join("active_learning.svg"), plot(&points)).unwrap();
    println!("wrote {}", out.join("active_learning.svg").display());
}

/// Mean IoU against labelled pixels, one thin line per seed and a thick mean line per
/// strategy (colour-blind-safe blue / orange).
fn plot(points: &[Point]) -> String {
    let (w, h, l, r, t, b) = (640.0, 400.0, 64.0, 16.0, 36.0, 48.0);
    let xmax = points.iter().map(|p| p.labelled).max().unwrap() as f64 * 1.05;
    let ymin = (points.iter().map(|p| p.miou).fold(1.0, f64::min) * 20.0).floor() / 20.0;
    let ymax = (points.iter().map(|p| p.miou).fold(0.0, f64::max) * 20.0).ceil() / 20.0;
    let sx = |x: f64| l + x / xmax * (w - l - r);
    let sy = |y: f64| h - b - (y - ymin) / (ymax - ymin) * (h - t - b);
    let mut svg = format!(
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" font-family=\"sans-serif\" font-size=\"12\">\n<rect width=\"100%\" height=\"100%\" fill=\"white\"/>\n<text x=\"{l}\" y=\"20\" font-size=\"14\">Hold-out mean IoU vs labelled pixels (demo scenes, {SEEDS} seeds, {BUDGET} px per round)</text>\n"
    );
    for i in 0..=5 {
        let y = ymin + (ymax - ymin) * i as f64 / 5.0;
        svg += &format!("<line x1=\"{l}\" x2=\"{x2}\" y1=\"{yy:.1}\" y2=\"{yy:.1}\" stroke=\"#ddd\"/><text x=\"{tx}\" y=\"{ty:.1}\" text-anchor=\"end\">{y:.2}</text>\n", x2 = w - r, yy = sy(y), tx = l - 6.0, ty = sy(y) + 4.0);
        let x = xmax * i as f64 / 5.0;
        svg += &format!(
            "<text x=\"{:.1}\" y=\"{}\" text-anchor=\"middle\">{:.0}k</text>\n",
            sx(x),
            h - b + 16.0,
            x / 1000.0
        );
    }
    svg += &format!(
        "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\">labelled pixels in the pool</text>\n",
        (l + w - r) / 2.0,
        h - 10.0
    );
    for (k, (strategy, colour)) in [("suggest", "#0072b2"), ("random", "#e69f00")]
        .iter()
        .enumerate()
    {
        let line = |pts: Vec<(f64, f64)>, width: f64, opacity: f64| {
            let d: Vec<String> = pts
                .iter()
                .map(|&(x, y)| format!("{:.1},{:.1}", sx(x), sy(y)))
                .collect();
            format!("<polyline fill=\"none\" stroke=\"{colour}\" stroke-width=\"{width}\" opacity=\"{opacity}\" points=\"{}\"/>\n", d.join(" "))
        };
        for seed in 0..SEEDS {
            let pts = points
                .iter()
                .filter(|p| p.strategy == *strategy && p.seed == seed)
                .map(|p| (p.labelled as f64, p.miou))
                .collect();
            svg += &line(pts, 1.0, 0.35);
        }
        let means: Vec<(f64, f64)> = (0..=ROUNDS)
            .map(|round| {
                let v: Vec<&Point> = points
                    .iter()
                    .filter(|p| p.strategy == *strategy && p.round == round)
                    .collect();
                let n = v.len() as f64;
                (
                    v.iter().map(|p| p.labelled as f64).sum::<f64>() / n,
                    v.iter().map(|p| p.miou).sum::<f64>() / n,
                )
            })
            .collect();
        for &(x, y) in &means {
            svg += &format!(
                "<circle cx=\"{:.1}\" cy=\"{:.1}\" r=\"3.5\" fill=\"{colour}\"/>\n",
                sx(x),
                sy(y)
            );
        }
        svg += &line(means, 3.0, 1.0);
        let label = if *strategy == "suggest" {
            "where suggest points (mean)"
        } else {
            "random 16x16 patches (mean)"
        };
        svg += &format!("<rect x=\"{}\" y=\"{}\" width=\"14\" height=\"4\" fill=\"{colour}\"/><text x=\"{}\" y=\"{}\">{label}</text>\n", w - 230.0, h - b - 40.0 + k as f64 * 18.0, w - 210.0, h - b - 35.0 + k as f64 * 18.0);
    }
    svg + "</svg>\n"
}

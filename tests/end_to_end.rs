//! The commands end to end through the `grove` binary, on the built-in demo scenes.

use std::path::Path;
use std::process::Command;

fn grove(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap();
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(
        out.status.success(),
        "grove {args:?} failed:\n{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    stdout
}

fn read_json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// The bar for the demo: held-out mean IoU ≥ 0.90 with default settings.
#[test]
fn demo_reaches_its_quality_bar_and_writes_everything() {
    let t = tempfile::tempdir().unwrap();
    let out = t.path().join("demo");
    let text = grove(&["demo", "--out", out.to_str().unwrap()]);
    let m = read_json(&out.join("metrics.json"));
    for key in [
        "pixel_accuracy",
        "mean_iou",
        "mean_class_accuracy",
        "per_class_iou",
        "confusion",
        "classes",
    ] {
        assert!(m.get(key).is_some(), "metrics.json lacks {key}");
    }
    let miou = m["mean_iou"].as_f64().unwrap();
    assert!(
        miou >= 0.90,
        "demo held-out mean IoU {miou:.4} < 0.90\n{text}"
    );
    let n_images = std::fs::read_dir(out.join("train/images")).unwrap().count()
        + std::fs::read_dir(out.join("test/images")).unwrap().count();
    for sub in ["labels", "overlays", "confidence"] {
        let n = std::fs::read_dir(out.join("predictions").join(sub))
            .unwrap()
            .count();
        assert_eq!(n, n_images, "predictions/{sub}");
    }
}

/// train → eval --json → apply, as a user would type them; the label maps written by
/// apply are themselves valid label files for the same class table.
#[test]
fn train_eval_apply_commands() {
    let t = tempfile::tempdir().unwrap();
    let root = t.path();
    grove::demo::write_demo_dataset(&root.join("train"), 0..3, 128, 3).unwrap();
    grove::demo::write_demo_dataset(&root.join("test"), 3..5, 128, 3).unwrap();
    let model = root.join("m.grove");
    let s = |p: &Path| p.to_str().unwrap().to_string();
    grove(&[
        "train",
        &s(&root.join("train")),
        "--model",
        &s(&model),
        "--trees",
        "8",
        "--textons",
        "8",
        "--threads",
        "1",
    ]);
    let json = root.join("scores.json");
    let text = grove(&[
        "eval",
        &s(&model),
        &s(&root.join("test")),
        "--json",
        &s(&json),
    ]);
    assert!(
        text.contains("mean IoU") && text.contains("confusion matrix"),
        "{text}"
    );
    let m = read_json(&json);
    assert_eq!(
        m["classes"].as_array().unwrap().len(),
        m["confusion"].as_array().unwrap().len()
    );
    let out = root.join("out");
    grove(&[
        "apply",
        &s(&model),
        &s(&root.join("test")),
        "--out",
        &s(&out),
        "--probabilities",
        "--confidence",
    ]);
    assert!(out.join("labels/farm_003.png").is_file());
    assert!(out.join("confidence/farm_004.png").is_file());
    assert!(
        out.join("probabilities/farm_004")
            .read_dir()
            .unwrap()
            .count()
            >= 2
    );
    // Feed the predictions back as labels: they must decode through the class table.
    let ds = grove::dataset::Dataset::open(&root.join("test"), Default::default()).unwrap();
    let back = ds.read_labels(&out.join("labels/farm_003.png")).unwrap();
    assert_eq!(back.indices.len(), 128 * 128);
    // No temporary files left behind.
    let stray = std::fs::read_dir(out.join("labels"))
        .unwrap()
        .filter(|e| {
            e.as_ref()
                .unwrap()
                .file_name()
                .to_string_lossy()
                .starts_with(".grove-tmp")
        })
        .count();
    assert_eq!(stray, 0);
}

/// Same seed → identical model bytes and identical predictions on 1, 2 and 8 threads.
#[test]
fn model_bytes_and_outputs_do_not_depend_on_thread_count() {
    let t = tempfile::tempdir().unwrap();
    grove::demo::write_demo_dataset(t.path(), 0..3, 96, 11).unwrap();
    let ds = grove::dataset::Dataset::open(t.path(), Default::default()).unwrap();
    let mut cfg = grove::segmenter::TrainConfig::default();
    cfg.forest.n_trees = 6;
    cfg.features.textons = 8;
    let image = grove::imageio::read_image(&ds.entries[0].image).unwrap();
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            let mut m = cfg.fit(&ds, &ds.labelled(), Default::default()).unwrap();
            m.provenance.created_unix = 0;
            let probs: Vec<u32> = m
                .predict_proba(&image)
                .data
                .iter()
                .map(|p| p.to_bits())
                .collect();
            (grove::model::to_bytes(&m), probs)
        })
    };
    let one = run(1);
    for threads in [2, 8] {
        let other = run(threads);
        assert!(
            one.0 == other.0,
            "model bytes differ between 1 and {threads} threads"
        );
        assert!(
            one.1 == other.1,
            "probabilities differ between 1 and {threads} threads"
        );
    }
}

/// Scribbles: colour-coded RGBA label files where only a few short strokes per class are
/// painted (transparent elsewhere) still train a usable model, and unlabelled pixels are
/// neither trained nor scored on.
#[test]
fn scribbled_colour_labels_train_a_usable_model() {
    let t = tempfile::tempdir().unwrap();
    let full = t.path().join("full");
    grove::demo::write_demo_dataset(&full, 0..4, 160, 5).unwrap();
    let ds_full = grove::dataset::Dataset::open(&full, Default::default()).unwrap();
    let scribbled = t.path().join("scribbled");
    std::fs::create_dir_all(scribbled.join("labels")).unwrap();
    std::fs::create_dir_all(scribbled.join("images")).unwrap();
    std::fs::copy(full.join("classes.toml"), scribbled.join("classes.toml")).unwrap();
    let colours: Vec<[u8; 3]> = ds_full.classes.classes().iter().map(|c| c.color).collect();
    let mut painted = 0usize;
    for e in ds_full.entries.iter().take(3) {
        std::fs::copy(
            &e.image,
            scribbled.join("images").join(e.image.file_name().unwrap()),
        )
        .unwrap();
        let truth = ds_full.read_labels(e.labels.as_ref().unwrap()).unwrap();
        // Keep every 9th row, and on it only pixels whose 5x5 neighbourhood (on that row) is
        // one class: short horizontal strokes inside regions, under 10 % of the image.
        let mut rgba = image::RgbaImage::new(160, 160);
        for y in (4..156).step_by(9) {
            for x in 2..158 {
                let c = truth.indices[y * 160 + x];
                if (x - 2..=x + 2).all(|xx| truth.indices[y * 160 + xx] == c) {
                    let [r, g, b] = colours[c as usize];
                    rgba.put_pixel(x as u32, y as u32, image::Rgba([r, g, b, 255]));
                    painted += 1;
                }
            }
        }
        rgba.save(scribbled.join("labels").join(format!("{}.png", e.stem)))
            .unwrap();
    }
    assert!(painted < 3 * 160 * 160 / 10, "scribbles must be sparse");
    let ds = grove::dataset::Dataset::open(&scribbled, Default::default()).unwrap();
    let mut cfg = grove::segmenter::TrainConfig::default();
    cfg.forest.n_trees = 16;
    let model = cfg.fit(&ds, &ds.labelled(), Default::default()).unwrap();
    let labelled: u64 = model.provenance.labelled_per_class.iter().sum();
    assert_eq!(
        labelled as usize, painted,
        "only painted pixels count as labelled"
    );
    let held_out: Vec<_> = ds_full.entries.iter().skip(3).collect();
    let cm = grove::eval::score::evaluate(&model, &ds_full, &held_out, Default::default()).unwrap();
    let acc = cm.pixel_accuracy().unwrap();
    eprintln!("scribbles: {painted} labelled pixels, held-out pixel accuracy {acc:.3}");
    // A floor, not a target: scribbles on 3 small scenes should still get most pixels right.
    assert!(acc >= 0.8, "pixel accuracy from scribbles {acc:.3}");
}

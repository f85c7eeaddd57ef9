//! `grove crossval` on demo scenes: the folds partition the images, no fold model saw the
//! images it scores, the JSON carries every key of `eval --json` plus the folds, and one fold
//! gives exactly what a user gets by hand with `grove train` on the other images and
//! `grove eval` on its own.

use std::path::Path;
use std::process::Command;

use grove::dataset::{Dataset, LabelOptions};
use grove::demo::write_demo_dataset;
use grove::eval::crossval::cross_validate;
use grove::progress::Progress;
use grove::segmenter::TrainConfig;
use serde_json::Value;

fn grove(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap()
}

fn grove_ok(args: &[&str]) -> String {
    let out = grove(args);
    assert!(
        out.status.success(),
        "grove {args:?} failed:\n{}\n{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

fn read_json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// Small and fast training options, the same for crossval and the by-hand run.
const OPTS: [&str; 8] = [
    "--trees",
    "8",
    "--textons",
    "8",
    "--samples-per-image",
    "1500",
    "--seed",
    "3",
];

/// Copies the named images (and labels) of `from` into a new dataset folder `to`.
fn subset(from: &Path, to: &Path, stems: &[String]) {
    for sub in ["images", "labels"] {
        std::fs::create_dir_all(to.join(sub)).unwrap();
        for s in stems {
            let name = format!("{s}.png");
            std::fs::copy(from.join(sub).join(&name), to.join(sub).join(&name)).unwrap();
        }
    }
    std::fs::copy(from.join("classes.toml"), to.join("classes.toml")).unwrap();
}

#[test]
fn folds_partition_images_and_one_fold_equals_train_plus_eval() {
    let t = tempfile::tempdir().unwrap();
    let data = t.path().join("fields");
    write_demo_dataset(&data, 0..7, 96, 5).unwrap();
    let stems: Vec<String> = (0..7).map(|i| format!("farm_{i:03}")).collect();

    // Library: every held-out image is scored by a model that did not train on it.
    let ds = Dataset::open(&data, LabelOptions::default()).unwrap();
    let mut cfg = TrainConfig {
        samples_per_image: 1500,
        seed: 3,
        ..TrainConfig::default()
    };
    cfg.forest.n_trees = 8;
    cfg.features.textons = 8;
    let mut scored = Vec::new();
    let cv = cross_validate(
        &cfg,
        &ds,
        &ds.labelled(),
        3,
        0,
        &grove::prediction::SmoothDefault::NONE.settings(),
        Progress::default(),
        |model, e, _, _| {
            let trained: Vec<&str> = model
                .provenance
                .training_images
                .iter()
                .map(|i| i.name.as_str())
                .collect();
            assert!(
                !trained.contains(&format!("{}.png", e.stem).as_str()),
                "{} scored by a model trained on it",
                e.stem
            );
            scored.push(e.stem.clone());
            Ok(())
        },
    )
    .unwrap();
    scored.sort();
    assert_eq!(scored, stems, "every image scored exactly once");
    assert_eq!(cv.folds.len(), 3);
    assert!(!cv.leave_one_image_out);

    // CLI: JSON keys of eval --json, plus the folds.
    let json = t.path().join("cv.json");
    let text = grove_ok(
        &[
            &["crossval", data.to_str().unwrap(), "--folds", "3"][..],
            &OPTS,
            &["--json", json.to_str().unwrap(), "--tile", "0"],
        ]
        .concat(),
    );
    assert!(text.contains("mean ± sd") && text.contains("class IoU"));
    assert!(
        !text.contains('\x1b'),
        "no colour when stdout is not a terminal"
    );
    let cvj = read_json(&json);
    let folds = cvj["folds"].as_array().unwrap();
    let mut held: Vec<String> = folds
        .iter()
        .flat_map(|f| f["images"].as_array().unwrap().clone())
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    held.sort();
    assert_eq!(held, stems, "folds partition the images");
    for f in folds {
        for key in [
            "images",
            "mean_iou",
            "pixel_accuracy",
            "per_class_iou",
            "boundary_f1",
            "confusion",
        ] {
            assert!(f.get(key).is_some(), "fold key {key}");
        }
        assert_eq!(
            f["training_images"].as_u64().unwrap() as usize + f["images"].as_array().unwrap().len(),
            7
        );
    }
    for key in ["pixel_accuracy", "mean_iou", "boundary_f1", "per_class_iou"] {
        assert!(cvj["summary"].get(key).is_some(), "summary key {key}");
    }
    // The pooled confusion is the sum of the folds'.
    let k = cvj["classes"].as_array().unwrap().len();
    for tr in 0..k {
        for p in 0..k {
            let sum: u64 = folds
                .iter()
                .map(|f| f["confusion"][tr][p].as_u64().unwrap())
                .sum();
            assert_eq!(cvj["confusion"][tr][p].as_u64().unwrap(), sum);
        }
    }

    // By hand, fold 1: train on the other images, eval on its own, same options.
    let f1: Vec<String> = folds[0]["images"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    let rest: Vec<String> = stems.iter().filter(|s| !f1.contains(s)).cloned().collect();
    let (train_dir, test_dir) = (t.path().join("train"), t.path().join("test"));
    subset(&data, &train_dir, &rest);
    subset(&data, &test_dir, &f1);
    let model = t.path().join("m.grove");
    grove_ok(
        &[
            &[
                "train",
                train_dir.to_str().unwrap(),
                "--model",
                model.to_str().unwrap(),
            ][..],
            &OPTS,
        ]
        .concat(),
    );
    let ej = t.path().join("eval.json");
    grove_ok(&[
        "eval",
        model.to_str().unwrap(),
        test_dir.to_str().unwrap(),
        "--json",
        ej.to_str().unwrap(),
        // crossval scores the forest's maps unless told to smooth; so must the twin.
        "--smooth",
        "none",
    ]);
    let eval = read_json(&ej);
    assert_eq!(
        eval["confusion"], folds[0]["confusion"],
        "fold 1 vs train + eval"
    );
    assert_eq!(eval["mean_iou"], folds[0]["mean_iou"]);
    // Every key of eval --json is in crossval --json.
    for key in eval.as_object().unwrap().keys() {
        assert!(
            cvj.get(key).is_some(),
            "crossval --json lacks eval's key {key}"
        );
    }
}

#[test]
fn fewer_images_than_folds_is_leave_one_image_out_and_mistakes_are_explained() {
    let t = tempfile::tempdir().unwrap();
    let data = t.path().join("two");
    write_demo_dataset(&data, 0..2, 80, 1).unwrap();
    let json = t.path().join("cv.json");
    grove_ok(
        &[
            &["crossval", data.to_str().unwrap(), "--folds", "5"][..],
            &OPTS,
            &["--json", json.to_str().unwrap()],
        ]
        .concat(),
    );
    let cvj = read_json(&json);
    assert_eq!(cvj["n_folds"], 2);
    assert_eq!(cvj["leave_one_image_out"], true);
    assert!(cvj["folds"]
        .as_array()
        .unwrap()
        .iter()
        .all(|f| f["images"].as_array().unwrap().len() == 1));

    // One fold is no cross-validation: a usage error.
    let out = grove(&["crossval", data.to_str().unwrap(), "--folds", "1"]);
    assert_eq!(out.status.code(), Some(2));
    // One labelled image: named, with what is needed.
    std::fs::remove_file(data.join("labels/farm_001.png")).unwrap();
    let out = grove(&["crossval", data.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(3));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("at least 2 labelled images") && err.contains("two"),
        "{err}"
    );
    // An output that is an input is refused before any training.
    let label = data.join("labels/farm_000.png");
    let out = grove(&[
        "crossval",
        data.to_str().unwrap(),
        "--json",
        label.to_str().unwrap(),
    ]);
    assert!(!out.status.success());
}

//! Bad input produces a clear error naming the file, never a panic (checked through the
//! library and through the `grove` binary, whose exit code says the kind of error (3 input data, 4 model file...), not a panic's 101).

use std::path::{Path, PathBuf};
use std::process::Command;

use grove::dataset::{Dataset, LabelOptions};
use grove::progress::Progress;
use grove::segmenter::TrainConfig;

const TABLE: &str = "[[class]]\nid = 0\nname = \"soil\"\ncolor = \"#8a6a4a\"\n\n[[class]]\nid = 1\nname = \"crop\"\ncolor = \"#2f9e44\"\n";

/// A tiny dataset: `labels` gives each image's label values (w × h each).
fn dataset(dir: &Path, table: &str, images: &[(&str, u32, u32, Vec<u8>)]) -> PathBuf {
    std::fs::create_dir_all(dir.join("images")).unwrap();
    std::fs::create_dir_all(dir.join("labels")).unwrap();
    std::fs::write(dir.join("classes.toml"), table).unwrap();
    for (name, w, h, labels) in images {
        let img = image::RgbImage::from_fn(*w, *h, |x, y| {
            image::Rgb([(x * 7 % 256) as u8, (y * 5 % 256) as u8, 90])
        });
        img.save(dir.join("images").join(format!("{name}.png")))
            .unwrap();
        let lab = image::GrayImage::from_raw(*w, *h, labels.clone()).unwrap();
        lab.save(dir.join("labels").join(format!("{name}.png")))
            .unwrap();
    }
    dir.to_path_buf()
}

fn halves(w: u32, h: u32) -> Vec<u8> {
    (0..w * h)
        .map(|i| if i % w < w / 2 { 0 } else { 1 })
        .collect()
}

fn small_config() -> TrainConfig {
    let mut cfg = TrainConfig::default();
    cfg.features.textons = 4;
    cfg.features.bank.scales = vec![1.0];
    cfg.forest.n_trees = 2;
    cfg.samples_per_image = 200;
    cfg
}

fn train_error(root: &Path) -> String {
    let ds = match Dataset::open(root, LabelOptions::default()) {
        Ok(ds) => ds,
        Err(e) => return e.to_string(),
    };
    match small_config().fit(&ds, &ds.labelled(), Progress::default()) {
        Ok(_) => panic!("training should have failed"),
        Err(e) => e.to_string(),
    }
}

fn grove(args: &[&str]) -> (i32, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn corrupt_image_is_named() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, halves(16, 16))]);
    std::fs::write(root.join("images/a.png"), b"\x89PNG\r\n\x1a\ngarbage").unwrap();
    let err = train_error(&root);
    assert!(
        err.contains("a.png") && err.contains("truncated or damaged"),
        "{err}"
    );
}

#[test]
fn size_mismatch_is_named() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, halves(16, 16))]);
    image::GrayImage::from_raw(8, 8, vec![0; 64])
        .unwrap()
        .save(root.join("labels/a.png"))
        .unwrap();
    let err = train_error(&root);
    assert!(
        err.contains("labels/a.png") && err.contains("differs from image size 16x16"),
        "{err}"
    );
}

#[test]
fn unknown_label_value_is_listed_with_a_position() {
    let t = tempfile::tempdir().unwrap();
    let mut labels = halves(16, 16);
    labels[16 * 3 + 5] = 9;
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, labels)]);
    let err = train_error(&root);
    assert!(
        err.contains("a.png") && err.contains("value 9 (1 px, first at x=5, y=3)"),
        "{err}"
    );
}

#[test]
fn duplicate_ids_and_names_are_refused() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(
        &t.path().join("ids"),
        &TABLE.replace("id = 1", "id = 0"),
        &[("a", 8, 8, halves(8, 8))],
    );
    let err = train_error(&root);
    assert!(
        err.contains("classes.toml") && err.contains("duplicate class id 0"),
        "{err}"
    );
    let root = dataset(
        &t.path().join("names"),
        &TABLE.replace("crop", "soil"),
        &[("a", 8, 8, halves(8, 8))],
    );
    let err = train_error(&root);
    assert!(err.contains("duplicate class name 'soil'"), "{err}");
}

#[test]
fn no_labelled_pixels_is_an_error() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, vec![255; 256])]);
    let err = train_error(&root);
    assert!(err.contains("no labelled pixels"), "{err}");
}

#[test]
fn one_class_only_is_an_error() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, vec![1; 256])]);
    let err = train_error(&root);
    assert!(
        err.contains("only class 'crop'") && err.contains("at least two classes"),
        "{err}"
    );
}

#[test]
fn class_without_pixels_is_a_warning() {
    let t = tempfile::tempdir().unwrap();
    let table = format!("{TABLE}\n[[class]]\nid = 2\nname = \"water\"\ncolor = \"#1c7ed6\"\n");
    let root = dataset(t.path(), &table, &[("a", 16, 16, halves(16, 16))]);
    let ds = Dataset::open(&root, LabelOptions::default()).unwrap();
    let warnings = ds.check_counts(&[10, 10, 0]).unwrap();
    assert_eq!(warnings.len(), 1);
    assert!(warnings[0].contains("'water'"), "{warnings:?}");
    small_config()
        .fit(&ds, &ds.labelled(), Progress::default())
        .unwrap();
}

#[test]
fn binary_reports_errors_without_panicking() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, vec![1; 256])]);
    let model = t.path().join("m.grove");
    let (code, err) = grove(&[
        "train",
        root.to_str().unwrap(),
        "--model",
        model.to_str().unwrap(),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.starts_with("error: ") && err.contains("only class 'crop'"),
        "{err}"
    );
    assert!(!model.exists(), "no model file after a failed run");

    let (code, err) = grove(&[
        "apply",
        root.join("classes.toml").to_str().unwrap(),
        root.to_str().unwrap(),
        "--out",
        t.path().join("o").to_str().unwrap(),
    ]);
    assert_eq!(code, 4, "{err}");
    assert!(
        err.contains("classes.toml") && err.contains("not a grove model"),
        "{err}"
    );
}

#[test]
fn damaged_model_files_are_refused_clearly() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, halves(16, 16))]);
    let ds = Dataset::open(&root, LabelOptions::default()).unwrap();
    let model = small_config()
        .fit(&ds, &ds.labelled(), Progress::default())
        .unwrap();
    let bytes = grove::model::to_bytes(&model);
    assert!(grove::model::from_bytes(&bytes).is_ok());
    let truncated = grove::model::from_bytes(&bytes[..bytes.len() / 2]).unwrap_err();
    assert!(truncated.contains("truncated"), "{truncated}");
    let mut newer = bytes.clone();
    newer[8..12].copy_from_slice(&(grove::model::FORMAT_VERSION + 1).to_le_bytes());
    let err = grove::model::from_bytes(&newer).unwrap_err();
    assert!(err.contains("newer"), "{err}");
    let mut flipped = bytes.clone();
    let mid = flipped.len() / 2;
    flipped[mid] ^= 0xff;
    assert!(grove::model::from_bytes(&flipped)
        .unwrap_err()
        .contains("damaged"));
    assert!(grove::model::from_bytes(b"hello")
        .unwrap_err()
        .contains("not a grove model"));
}

#[test]
fn non_png_label_files_are_flagged() {
    let t = tempfile::tempdir().unwrap();
    let root = dataset(t.path(), TABLE, &[("a", 16, 16, halves(16, 16))]);
    image::GrayImage::from_raw(16, 16, halves(16, 16))
        .unwrap()
        .save(root.join("labels/a.jpg"))
        .unwrap();
    let ds = Dataset::open(&root, LabelOptions::default()).unwrap();
    assert!(
        ds.warnings
            .iter()
            .any(|w| w.contains("a.jpg") && w.contains("must be PNG")),
        "{:?}",
        ds.warnings
    );
}

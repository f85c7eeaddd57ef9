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
    // Found by the model_load fuzz target (fuzz/corpus/model_load/huge-length): a header that
    // announces a payload near u64::MAX once overflowed while the error message was formatted.
    let mut huge = bytes[..20].to_vec();
    huge[12..20].copy_from_slice(&u64::MAX.to_le_bytes());
    huge.extend([0u8; 16]);
    let err = grove::model::from_bytes(&huge).unwrap_err();
    assert!(err.contains("truncated"), "{err}");
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

// ---- The bad-input table (docs/bad-inputs.md): one test per row, through the binary. ----

/// A labelled dataset of two 16 × 16 images and a model trained on it.
fn fixture(dir: &Path) -> (PathBuf, PathBuf) {
    let root = dataset(
        &dir.join("data"),
        TABLE,
        &[("a", 16, 16, halves(16, 16)), ("b", 16, 16, halves(16, 16))],
    );
    let ds = Dataset::open(&root, LabelOptions::default()).unwrap();
    let model = small_config()
        .fit(&ds, &ds.labelled(), Progress::default())
        .unwrap();
    let path = dir.join("m.grove");
    grove::model::save(&model, &path).unwrap();
    (root, path)
}

fn p(path: &Path) -> &str {
    path.to_str().unwrap()
}

/// Runs the binary and checks its exit code and that stderr contains every `needles`.
fn expect(args: &[&str], code: i32, needles: &[&str]) {
    let (got, err) = grove(args);
    assert_eq!(got, code, "grove {args:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "grove {args:?}: expected {n:?} in:\n{err}");
    }
    assert!(!err.contains("panicked"), "{err}");
}

fn apply_one(model: &Path, image: &Path, out: &Path, code: i32, needles: &[&str]) {
    expect(
        &["apply", p(model), p(image), "--out", p(out)],
        code,
        needles,
    );
}

fn train_on(root: &Path, model: &Path, code: i32, needles: &[&str]) {
    expect(
        &[
            "train",
            p(root),
            "--model",
            p(model),
            "--trees",
            "2",
            "--textons",
            "4",
        ],
        code,
        needles,
    );
}

#[path = "support/crafted.rs"]
mod crafted;
use crafted::{float_tiff, png_declaring};

fn rgb_image(path: &Path, w: u32, h: u32) {
    image::RgbImage::from_fn(w, h, |x, y| image::Rgb([(x * 9) as u8, (y * 7) as u8, 60]))
        .save(path)
        .unwrap();
}

#[test]
fn table_corrupt_truncated_and_odd_images() {
    let t = tempfile::tempdir().unwrap();
    let (_, model) = fixture(t.path());
    let out = t.path().join("out");
    // Truncated PNG.
    let png = t.path().join("cut.png");
    rgb_image(&png, 64, 64);
    let bytes = std::fs::read(&png).unwrap();
    std::fs::write(&png, &bytes[..bytes.len() / 2]).unwrap();
    apply_one(&model, &png, &out, 3, &["cut.png", "truncated"]);
    // JPEG cut in half (the decoder alone would fill the missing half with grey).
    let jpg = t.path().join("half.jpg");
    rgb_image(&jpg, 64, 64);
    let bytes = std::fs::read(&jpg).unwrap();
    std::fs::write(&jpg, &bytes[..bytes.len() / 2]).unwrap();
    apply_one(&model, &jpg, &out, 3, &["half.jpg", "JPEG is truncated"]);
    // Truncated TIFF.
    let tif = t.path().join("cut.tif");
    rgb_image(&tif, 64, 64);
    let bytes = std::fs::read(&tif).unwrap();
    std::fs::write(&tif, &bytes[..bytes.len() / 2]).unwrap();
    apply_one(&model, &tif, &out, 3, &["cut.tif", "truncated"]);
    // Zero bytes.
    let empty = t.path().join("empty.png");
    std::fs::write(&empty, b"").unwrap();
    apply_one(&model, &empty, &out, 3, &["empty.png", "empty (0 bytes)"]);
    // Text with an image name.
    let text = t.path().join("notes.png");
    std::fs::write(&text, b"these are my notes").unwrap();
    apply_one(
        &model,
        &text,
        &out,
        3,
        &["notes.png", "not a PNG, JPEG or TIFF image"],
    );
    // A JPEG named .png is read by its content.
    let misnamed = t.path().join("photo.png");
    std::fs::copy(t.path().join("half.jpg"), &misnamed).unwrap();
    rgb_image(&t.path().join("whole.jpg"), 16, 16);
    std::fs::copy(t.path().join("whole.jpg"), &misnamed).unwrap();
    apply_one(&model, &misnamed, &out, 0, &[]);
    // 32-bit float TIFF (grey): says which kinds are supported.
    let float = t.path().join("float.tif");
    std::fs::write(&float, float_tiff(&[0.5; 16])).unwrap();
    apply_one(&model, &float, &out, 3, &["float.tif", "8- or 16-bit"]);
    // An RGB float TIFF is read, but NaN or infinity is refused with its position.
    let mut values = vec![0.5f32; 48];
    values[3 * 6 + 1] = f32::NAN;
    let nan = t.path().join("nan.tif");
    image::Rgb32FImage::from_raw(4, 4, values)
        .unwrap()
        .save(&nan)
        .unwrap();
    apply_one(
        &model,
        &nan,
        &out,
        3,
        &["nan.tif", "non-finite value (NaN) at x=2, y=1"],
    );
}

#[test]
fn table_oversized_images_fail_before_allocating() {
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    // An image header declaring 100000 × 100000 (a few hundred bytes on disk).
    let big = t.path().join("big.png");
    std::fs::write(&big, png_declaring(100_000, 100_000, 2)).unwrap();
    // Whole-image (`--tile 0`): refused from the header, before allocating.
    expect(
        &[
            "apply",
            p(&model),
            p(&big),
            "--out",
            p(&t.path().join("o")),
            "--tile",
            "0",
        ],
        3,
        &[
            "big.png",
            "100000x100000",
            "--max-megapixels",
            "GB of memory",
        ],
    );
    // Tiled (the default): streamed in bands, so nothing big is allocated; the missing pixel
    // data is found in the first band.
    apply_one(
        &model,
        &big,
        &t.path().join("o"),
        3,
        &["big.png", "truncated or damaged"],
    );
    assert!(
        !t.path().join("o").exists()
            || std::fs::read_dir(t.path().join("o")).unwrap().all(|e| !e
                .unwrap()
                .file_name()
                .to_string_lossy()
                .starts_with("big")),
        "no map of the damaged image is left"
    );
    // A 16-megapixel-limit override makes an ordinary image too large, with the same message.
    let img = t.path().join("64.png");
    rgb_image(&img, 64, 64);
    expect(
        &[
            "--max-megapixels",
            "0.001",
            "apply",
            p(&model),
            p(&img),
            "--out",
            p(&t.path().join("o")),
        ],
        3,
        &["64.png", "above the limit of 0.001 megapixels"],
    );
    // A label file declaring 100000 × 100000 is compared with its image by header.
    std::fs::write(
        root.join("labels/a.png"),
        png_declaring(100_000, 100_000, 0),
    )
    .unwrap();
    let started = std::time::Instant::now();
    train_on(
        &root,
        &t.path().join("m2.grove"),
        3,
        &[
            "labels/a.png",
            "label size 100000x100000 differs from image size 16x16",
        ],
    );
    expect(
        &["eval", p(&model), p(&root)],
        3,
        &["label size 100000x100000"],
    );
    assert!(
        started.elapsed().as_secs() < 20,
        "refused without allocating 10 GB"
    );
}

#[test]
fn table_label_problems() {
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    // Unknown colour in a colour-coded label.
    let mut rgb = image::RgbImage::from_pixel(16, 16, image::Rgb([0x8a, 0x6a, 0x4a]));
    rgb.put_pixel(3, 2, image::Rgb([1, 2, 3]));
    rgb.save(root.join("labels/a.png")).unwrap();
    expect(
        &["eval", p(&model), p(&root)],
        3,
        &[
            "labels/a.png",
            "colour #010203 (1 px, first at x=3, y=2)",
            "--unknown-as-unlabelled",
        ],
    );
    // Truncated label PNG.
    let good = std::fs::read(root.join("labels/b.png")).unwrap();
    std::fs::write(root.join("labels/a.png"), &good[..good.len() / 2]).unwrap();
    train_on(
        &root,
        &t.path().join("x.grove"),
        3,
        &["labels/a.png", "label PNG"],
    );
}

#[test]
fn table_dataset_and_class_table_problems() {
    let t = tempfile::tempdir().unwrap();
    let (root, _) = fixture(t.path());
    let m = t.path().join("x.grove");
    // Not a dataset folder.
    train_on(&t.path().join("nowhere"), &m, 3, &["not a grove dataset"]);
    // Empty images/.
    let empty = t.path().join("empty");
    std::fs::create_dir_all(empty.join("images")).unwrap();
    std::fs::write(empty.join("classes.toml"), TABLE).unwrap();
    train_on(&empty, &m, 3, &["no images (PNG, JPEG or TIFF) found"]);
    // Missing class table, and a class table that is a folder.
    std::fs::remove_file(empty.join("classes.toml")).unwrap();
    train_on(&empty, &m, 3, &["classes.toml", "missing class table"]);
    std::fs::create_dir(empty.join("classes.toml")).unwrap();
    train_on(&empty, &m, 3, &["classes.toml", "is a folder"]);
    // Malformed TOML, duplicate colours, too few classes.
    let table = root.join("classes.toml");
    std::fs::write(&table, "[[class]\nid = 0").unwrap();
    train_on(&root, &m, 3, &["classes.toml", "invalid class table"]);
    std::fs::write(&table, TABLE.replace("#2f9e44", "#8a6a4a")).unwrap();
    train_on(&root, &m, 3, &["duplicate colour #8a6a4a"]);
    std::fs::write(&table, "class = []\n").unwrap();
    train_on(&root, &m, 3, &["0 class(es)", "at least 2"]);
    // Class names that would steer output paths or break tables.
    for (name, needle) in [
        ("../../../escaped", "contains '/'"),
        ("a/b", "contains '/'"),
        ("x\\ny", "control character"),
        (".hidden", "starts with '.'"),
    ] {
        std::fs::write(&table, TABLE.replace("\"crop\"", &format!("\"{name}\""))).unwrap();
        train_on(&root, &m, 3, &["classes.toml", needle]);
    }
    assert!(!m.exists());
}

#[test]
fn table_grove_temporaries_are_never_inputs() {
    let t = tempfile::tempdir().unwrap();
    let (root, _) = fixture(t.path());
    std::fs::copy(
        root.join("images/a.png"),
        root.join("images/.grove-tmp-1@h~0.png"),
    )
    .unwrap();
    let ds = Dataset::open(&root, LabelOptions::default()).unwrap();
    assert_eq!(ds.entries.len(), 2, "a temporary was listed as an image");
}

#[cfg(unix)]
#[test]
fn table_non_utf8_file_names_are_refused_not_dropped() {
    use std::os::unix::ffi::OsStrExt;
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    let name = std::ffi::OsStr::from_bytes(b"caf\xe9.png");
    std::fs::copy(root.join("images/a.png"), root.join("images").join(name)).unwrap();
    std::fs::copy(root.join("labels/a.png"), root.join("labels").join(name)).unwrap();
    train_on(
        &root,
        &t.path().join("x.grove"),
        3,
        &["not valid UTF-8", "rename"],
    );
    expect(
        &[
            "apply",
            p(&model),
            p(&root),
            "--out",
            p(&t.path().join("o")),
        ],
        3,
        &["not valid UTF-8"],
    );
}

#[test]
fn table_model_file_problems() {
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    let bytes = std::fs::read(&model).unwrap();
    let out = t.path().join("o");
    let img = root.join("images/a.png");
    let bad = t.path().join("bad.grove");
    let check = |content: &[u8], needle: &str| {
        std::fs::write(&bad, content).unwrap();
        apply_one(&bad, &img, &out, 4, &["bad.grove", needle]);
    };
    check(b"hello", "not a grove model file");
    check(&bytes[..bytes.len() / 2], "truncated");
    let mut flipped = bytes.clone();
    let mid = flipped.len() / 2;
    flipped[mid] ^= 0x10;
    check(&flipped, "damaged (checksum mismatch)");
    let mut newer = bytes.clone();
    newer[8..12].copy_from_slice(&(grove::model::FORMAT_VERSION + 1).to_le_bytes());
    check(&newer, "newer than this grove");
    let mut appended = bytes.clone();
    appended.extend(b"garbage");
    check(&appended, "7 unexpected bytes after its end");
    apply_one(
        Path::new("/dev/zero"),
        &img,
        &out,
        4,
        &["/dev/zero", "not a regular file"],
    );
    // Arguments swapped: the dataset where the model should be.
    expect(
        &["eval", p(&root), p(&model)],
        4,
        &["is a folder, not a model file", "right order"],
    );
    expect(
        &["info", p(&t.path().join("missing.grove"))],
        4,
        &["missing.grove", "no such file or folder"],
    );
}

#[test]
fn table_grey_image_into_colour_model_warns() {
    let t = tempfile::tempdir().unwrap();
    let (_, model) = fixture(t.path());
    let grey = t.path().join("grey.png");
    image::GrayImage::from_pixel(16, 16, image::Luma([100]))
        .save(&grey)
        .unwrap();
    apply_one(
        &model,
        &grey,
        &t.path().join("o"),
        0,
        &[
            "warning",
            "grey image, but the model was trained on colour images",
        ],
    );
}

#[test]
fn table_outputs_never_replace_inputs_or_foreign_files() {
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    let before = std::fs::read(root.join("labels/a.png")).unwrap();
    // apply into the dataset: refused; predictions never replace hand-made labels.
    expect(
        &["apply", p(&model), p(&root), "--out", p(&root)],
        5,
        &["is one of this command's inputs"],
    );
    expect(
        &[
            "apply",
            p(&model),
            p(&root.join("images")),
            "--out",
            p(&root),
        ],
        5,
        &["is a dataset folder"],
    );
    assert_eq!(std::fs::read(root.join("labels/a.png")).unwrap(), before);
    // train onto its own class table or image: refused even with --force.
    let table = root.join("classes.toml");
    train_on(
        &root,
        &table,
        5,
        &["classes.toml", "is one of this command's inputs"],
    );
    expect(
        &[
            "train",
            p(&root),
            "--model",
            p(&root.join("images/a.png")),
            "--force",
        ],
        5,
        &["inputs"],
    );
    assert_eq!(std::fs::read_to_string(&table).unwrap(), TABLE);
    // A foreign file at --model: refused, replaced with --force.
    let notes = t.path().join("notes.txt");
    std::fs::write(&notes, "mine").unwrap();
    train_on(
        &root,
        &notes,
        5,
        &["notes.txt", "not written by grove", "--force"],
    );
    assert_eq!(std::fs::read_to_string(&notes).unwrap(), "mine");
    expect(
        &[
            "train",
            p(&root),
            "--model",
            p(&notes),
            "--trees",
            "2",
            "--textons",
            "4",
            "--force",
        ],
        0,
        &[],
    );
    // grove's own model is replaced without --force.
    train_on(&root, &notes, 0, &[]);
    // eval --json onto a foreign file.
    let j = t.path().join("scores.json");
    std::fs::write(&j, "{}").unwrap();
    expect(
        &["eval", p(&model), p(&root), "--json", p(&j)],
        5,
        &["scores.json", "--force"],
    );
    // Re-running apply replaces its own outputs.
    let out = t.path().join("out");
    for _ in 0..2 {
        expect(
            &[
                "apply",
                p(&model),
                p(&root),
                "--out",
                p(&out),
                "--probabilities",
            ],
            0,
            &[],
        );
    }
}

#[test]
fn table_output_places_checked_before_the_work() {
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    let file = t.path().join("plain-file");
    std::fs::write(&file, "x").unwrap();
    // --model's parent is a file: refused before training, in words.
    train_on(
        &root,
        &file.join("m.grove"),
        5,
        &["is a file, not a folder"],
    );
    // --model is a folder.
    train_on(&root, t.path(), 5, &["is a folder; give a file name"]);
    // --out is a file.
    apply_one(
        &model,
        &root.join("images/a.png"),
        &file,
        5,
        &["plain-file", "is a file, not a folder"],
    );
    // Two inputs with the same name would write the same outputs.
    let other = t.path().join("other");
    std::fs::create_dir_all(&other).unwrap();
    std::fs::copy(root.join("images/a.png"), other.join("a.png")).unwrap();
    expect(
        &[
            "apply",
            p(&model),
            p(&root),
            p(&other),
            "--out",
            p(&t.path().join("o")),
        ],
        3,
        &["same name as"],
    );
}

#[test]
fn table_unwritable_and_full_disk_messages() {
    // As root (CI), no folder is unwritable and there is no full disk to hand, so these two
    // rows check the wording of the OS errors that `write_atomic` reports.
    let denied = grove::GroveError::write(
        "maps/a.png",
        std::io::Error::from(std::io::ErrorKind::PermissionDenied),
    );
    assert!(
        denied
            .to_string()
            .contains("maps/a.png: cannot write: permission denied"),
        "{denied}"
    );
    assert_eq!(denied.kind().exit_code(), 5);
    let full = grove::GroveError::write("maps/a.png", std::io::Error::from_raw_os_error(28)); // ENOSPC
    assert!(
        full.to_string().contains("no space left on the device"),
        "{full}"
    );
    // /dev/full as the target folder's file: the rename-based write fails cleanly, exit 5.
    #[cfg(target_os = "linux")]
    {
        let (code, err) = grove(&["demo", "--out", "/dev/full"]);
        assert_eq!(code, 5, "{err}");
    }
}

#[test]
fn table_options_out_of_range_are_usage_errors() {
    let t = tempfile::tempdir().unwrap();
    let (root, model) = fixture(t.path());
    let m = t.path().join("x.grove");
    let train = |extra: &[&str], needle: &str| {
        let mut args = vec!["train", p(&root), "--model", p(&m)];
        args.extend(extra);
        expect(&args, 2, &[needle]);
    };
    train(
        &["--texton-windows", "65537"],
        "texton window 65537 must be an odd number between 1 and 65535",
    );
    train(&["--texton-windows", "4"], "must be an odd number");
    train(&["--trees", "0"], "trees = 0 must be between 1 and 4096");
    train(&["--max-depth", "1000"], "between 1 and 64");
    train(&["--textons", "100000"], "at most 1024");
    train(&["--scales", "0"], "scale 0 must be a number in (0, 64]");
    train(&["--samples-per-image", "0"], "between 1 and 1000000");
    train(&["--trees", "-3"], "unexpected argument");
    expect(
        &["--threads", "100000", "info", p(&model)],
        2,
        &["100000 is not in 1..=1024"],
    );
    expect(
        &["--threads", "0", "info", p(&model)],
        2,
        &["0 is not in 1..=1024"],
    );
    expect(
        &["--max-megapixels", "0", "info", p(&model)],
        2,
        &["--max-megapixels"],
    );
    expect(
        &[
            "apply",
            p(&model),
            p(&root),
            "--out",
            p(&t.path().join("o")),
            "--opacity",
            "2",
        ],
        2,
        &["--opacity 2"],
    );
    assert!(!m.exists());
}

#[test]
fn framed_payloads_claiming_huge_containers_are_refused() {
    // A crafted file with a valid hash whose payload claims a container of 2^40 elements
    // (bincode varint: 253, then a u64) at one of its first fields: an error, at once,
    // without trying to allocate it (see `model::SMALL_DECODED_BYTES`).
    for zeros in 0..32 {
        let mut payload = vec![0u8; zeros];
        payload.push(253);
        payload.extend((1u64 << 40).to_le_bytes());
        let err = grove::model::from_bytes(&grove::model::frame(&payload)).unwrap_err();
        assert!(
            err.contains("cannot be read") || err.contains("inconsistent"),
            "{err}"
        );
    }
}

//! `grove apply` streams large images (read, predicted and written band by band) and the
//! streamed outputs are the whole-image path's, byte for byte: every map, areas.csv/json
//! with `--pixel-size` and `--roi`, the resume records and the `--log-json` lines (apart from
//! timings and the `streamed` flag). The threshold is lowered with
//! `GROVE_STREAM_ABOVE_PIXELS` so small images stream. The reference is the whole-image
//! path, whose stages the other tests check against scipy and scikit-learn.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use grove::dataset::{Dataset, LabelOptions};
use grove::demo::render_scene;
use grove::progress::Progress;
use grove::segmenter::TrainConfig;

/// (stdout, stderr) of `grove ARGS` with `GROVE_STREAM_ABOVE_PIXELS` = `above`; fails the
/// test when grove fails.
fn grove(above: usize, args: &[&str]) -> (String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_grove"))
        .env("GROVE_STREAM_ABOVE_PIXELS", above.to_string())
        .args(args)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(out.status.success(), "grove {args:?} failed:\n{stderr}");
    (String::from_utf8_lossy(&out.stdout).into_owned(), stderr)
}

fn train_small(root: &Path) -> PathBuf {
    grove::demo::write_demo_dataset(&root.join("train"), 0..2, 96, 3).unwrap();
    let ds = Dataset::open(&root.join("train"), LabelOptions::default()).unwrap();
    let mut cfg = TrainConfig::default();
    cfg.features.textons = 4;
    cfg.features.bank.scales = vec![1.0, 2.0];
    cfg.features.position = true;
    cfg.forest.n_trees = 4;
    cfg.samples_per_image = 500;
    let model = cfg.fit(&ds, &ds.labelled(), Progress::default()).unwrap();
    let path = root.join("m.grove");
    grove::model::save(&model, &path).unwrap();
    path
}

/// Demo scenes of odd sizes as 8- and 16-bit, grey and RGB, PNG and TIFF, and a ROI mask for
/// each (an irregular region, so the counts depend on every row).
fn write_inputs(images: &Path, roi: &Path) {
    use image::{ImageBuffer, Luma, Rgb};
    std::fs::create_dir_all(images).unwrap();
    std::fs::create_dir_all(roi).unwrap();
    let scenes = [
        ("rgb8", "png", 157u32, 119u32),
        ("rgb16", "tif", 131, 101),
        ("grey8", "png", 97, 143),
        ("grey16", "tif", 120, 77),
    ];
    for (i, (name, ext, w, h)) in scenes.into_iter().enumerate() {
        let s = render_scene(7, i as u32, w as usize, h as usize);
        let file = images.join(format!("{name}.{ext}"));
        let grey: Vec<u8> = s
            .rgb
            .chunks_exact(3)
            .map(|p| ((p[0] as u32 * 77 + p[1] as u32 * 150 + p[2] as u32 * 29) >> 8) as u8)
            .collect();
        // 16-bit samples with low bits an 8-bit image would not have.
        let wide = |v: &[u8]| -> Vec<u16> {
            v.iter()
                .enumerate()
                .map(|(j, &b)| (b as u16) << 8 | (j * 37 % 256) as u16)
                .collect()
        };
        match name {
            "rgb8" => ImageBuffer::<Rgb<u8>, _>::from_raw(w, h, s.rgb.clone())
                .unwrap()
                .save(&file),
            "rgb16" => ImageBuffer::<Rgb<u16>, _>::from_raw(w, h, wide(&s.rgb))
                .unwrap()
                .save(&file),
            "grey8" => ImageBuffer::<Luma<u8>, _>::from_raw(w, h, grey)
                .unwrap()
                .save(&file),
            _ => ImageBuffer::<Luma<u16>, _>::from_raw(w, h, wide(&grey))
                .unwrap()
                .save(&file),
        }
        .unwrap();
        let mask = image::GrayImage::from_fn(w, h, |x, y| {
            let inside = (x * 7 + y * 3) % 23 < 15 && x + y > 10;
            Luma([if inside { 255 } else { 0 }])
        });
        mask.save(roi.join(format!("{name}.png"))).unwrap();
    }
}

/// Every file under `dir`, by relative path.
fn files(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<String, Vec<u8>>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                let rel = p.strip_prefix(root).unwrap().display().to_string();
                out.insert(rel, std::fs::read(&p).unwrap());
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(dir, dir, &mut out);
    out
}

/// A record or log line without what differs between runs (timing) and paths (`streamed`).
fn comparable(json: &[u8]) -> serde_json::Value {
    let mut v: serde_json::Value = serde_json::from_slice(json).unwrap();
    let o = v.as_object_mut().unwrap();
    o.remove("seconds");
    o.remove("streamed");
    v
}

fn streamed_flags(log: &str) -> Vec<bool> {
    log.lines()
        .map(|l| serde_json::from_str::<serde_json::Value>(l).unwrap()["streamed"] == true)
        .collect()
}

#[test]
fn streamed_apply_equals_whole_image_apply() {
    let t = tempfile::tempdir().unwrap();
    let model = train_small(t.path());
    let (images, roi) = (t.path().join("in"), t.path().join("roi"));
    write_inputs(&images, &roi);
    let run = |above: usize, out: &Path, extra: &[&str]| {
        let mut args = vec![
            "apply",
            model.to_str().unwrap(),
            images.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--tile",
            "40",
            "--smooth",
            "none",
            "--confidence",
            "--uncertainty",
            "--probabilities",
            "--pixel-size",
            "0.5m",
            "--roi",
            roi.to_str().unwrap(),
            "--log-json",
        ];
        args.extend_from_slice(extra);
        grove(above, &args)
    };
    let (whole_dir, stream_dir) = (t.path().join("whole"), t.path().join("stream"));
    let (whole_log, _) = run(usize::MAX, &whole_dir, &[]);
    let (stream_log, stream_err) = run(0, &stream_dir, &[]);
    assert_eq!(streamed_flags(&whole_log), [false; 4]);
    assert_eq!(streamed_flags(&stream_log), [true; 4]);
    // The RGB model warns about the grey images on both paths.
    assert!(stream_err.contains("grey image"), "{stream_err}");
    let (a, b) = (files(&whole_dir), files(&stream_dir));
    assert_eq!(
        a.keys().collect::<Vec<_>>(),
        b.keys().collect::<Vec<_>>(),
        "the same files"
    );
    // 4 images × (labels, overlay, confidence, 2 uncertainty, 5 probabilities, record) + 3.
    assert_eq!(a.len(), 4 * 11 + 3);
    for (name, bytes) in &a {
        if name.starts_with("done/") {
            assert_eq!(comparable(bytes), comparable(&b[name]), "{name}");
        } else {
            assert!(bytes == &b[name], "{name} differs between the paths");
        }
    }
    for (x, y) in whole_log.lines().zip(stream_log.lines()) {
        assert_eq!(comparable(x.as_bytes()), comparable(y.as_bytes()));
    }
    // A streamed run resumes the whole-image run's outputs (same model, same settings) ...
    let (log, _) = run(0, &whole_dir, &[]);
    assert!(log.lines().all(|l| l.contains("\"skipped\"")), "{log}");
    // ... and --force redoes them, streamed, to the same files.
    let (log, _) = run(0, &whole_dir, &["--force"]);
    assert_eq!(streamed_flags(&log), [true; 4]);
    for (name, bytes) in files(&whole_dir) {
        if !name.starts_with("done/") {
            assert!(bytes == a[&name], "{name} changed when redone streamed");
        }
    }
}

/// With smoothing on (the models' default) the streamed path smooths band by band in tiles
/// with a halo, as the whole-image path does with the same `--tile`: the same files, byte for
/// byte, for both solvers (mean-field's smoothed probabilities go into the confidence maps).
#[test]
fn streamed_smoothing_equals_whole_image_smoothing() {
    let t = tempfile::tempdir().unwrap();
    let model = train_small(t.path());
    let (images, roi) = (t.path().join("in"), t.path().join("roi"));
    write_inputs(&images, &roi);
    for method in ["expansion", "meanfield"] {
        let run = |above: usize, out: &Path| {
            grove(
                above,
                &[
                    "apply",
                    model.to_str().unwrap(),
                    images.to_str().unwrap(),
                    "--out",
                    out.to_str().unwrap(),
                    "--tile",
                    "40",
                    "--smooth",
                    method,
                    "--confidence",
                    "--roi",
                    roi.to_str().unwrap(),
                    "--log-json",
                ],
            )
        };
        let whole_dir = t.path().join(format!("whole-{method}"));
        let stream_dir = t.path().join(format!("stream-{method}"));
        let (whole_log, _) = run(usize::MAX, &whole_dir);
        let (stream_log, _) = run(0, &stream_dir);
        assert_eq!(streamed_flags(&whole_log), [false; 4]);
        assert_eq!(streamed_flags(&stream_log), [true; 4]);
        let (a, b) = (files(&whole_dir), files(&stream_dir));
        assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
        for (name, bytes) in &a {
            if name.starts_with("done/") {
                assert_eq!(comparable(bytes), comparable(&b[name]), "{name}");
            } else {
                assert!(
                    bytes == &b[name],
                    "{method}: {name} differs between the paths"
                );
            }
        }
    }
}

/// A streamed image needs memory by the tile, so the memory-derived size limit does not apply
/// to it, but a limit the user gives with `--max-megapixels` does, with the file named.
#[test]
fn an_explicit_size_limit_applies_to_streamed_images() {
    let t = tempfile::tempdir().unwrap();
    let model = train_small(t.path());
    let (images, roi) = (t.path().join("in"), t.path().join("roi"));
    write_inputs(&images, &roi);
    let image = images.join("rgb8.png");
    let out = t.path().join("out");
    let run = Command::new(env!("CARGO_BIN_EXE_grove"))
        .env("GROVE_STREAM_ABOVE_PIXELS", "0")
        .args(["--max-megapixels", "0.01", "apply"])
        .args([&model, &image])
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(3), "{stderr}");
    assert!(
        stderr.contains("rgb8.png") && stderr.contains("above --max-megapixels 0.010"),
        "{stderr}"
    );
    assert!(!out.join("labels").join("rgb8.png").exists());
}

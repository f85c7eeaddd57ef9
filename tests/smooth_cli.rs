//! The smoothing options end to end, through the `grove` binary: `--smooth`,
//! `--smooth-strength` on train/apply/eval, `eval --compare-smoothing` and its JSON keys, the
//! strength search of `train` (dense and scribble labels, one image), the model's stored
//! default, models of format version 1, and bad values.
//!
//! Data: the real MNI152 slices of `tests/data/mni152-tissue` (source and licence beside
//! them), and `tests/fixtures/model_v1`, a model written by grove before format version 2,
//! with the scores that grove gave it (see its README).

use std::path::{Path, PathBuf};

fn mni() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/mni152-tissue")
}

#[path = "support/run.rs"]
mod run;
use run::grove;

fn ok(args: &[&str]) -> String {
    let (code, out, err) = grove(args);
    assert_eq!(code, 0, "grove {args:?}\n{out}\n{err}");
    out
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// A dataset of the first `n` slices, labels kept only on rows where `keep(y)` holds.
fn slices(dir: &Path, n: usize, keep: impl Fn(u32) -> bool) -> PathBuf {
    for sub in ["images", "labels"] {
        std::fs::create_dir_all(dir.join(sub)).unwrap();
    }
    std::fs::copy(mni().join("classes.toml"), dir.join("classes.toml")).unwrap();
    let mut names: Vec<_> = std::fs::read_dir(mni().join("images"))
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    names.sort();
    for name in names.into_iter().take(n) {
        std::fs::copy(
            mni().join("images").join(&name),
            dir.join("images").join(&name),
        )
        .unwrap();
        let mut lab = image::open(mni().join("labels").join(&name))
            .unwrap()
            .to_luma8();
        for (_, y, p) in lab.enumerate_pixels_mut() {
            if !keep(y) {
                p.0[0] = 255;
            }
        }
        lab.save(dir.join("labels").join(&name)).unwrap();
    }
    dir.to_path_buf()
}

const SMALL: [&str; 6] = [
    "--trees",
    "4",
    "--samples-per-image",
    "500",
    "-q",
    "--force",
];

fn json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn train_chooses_a_strength_and_apply_eval_use_or_override_it() {
    let t = tempfile::tempdir().unwrap();
    let data = slices(&t.path().join("train"), 6, |_| true);
    let model = t.path().join("m.grove");
    let mut args = vec!["train", s(&data), "--model", s(&model)];
    args.extend(SMALL);
    let out = ok(&args);
    assert!(out.contains("smoothing default: "), "{out}");
    assert!(out.contains("strength mean IoU/boundary F1: 0 "), "{out}");
    assert!(out.contains("% of training"), "{out}");
    assert!(!out.contains("labelled strokes only"), "{out}");
    // Format version 2 (bytes 8..12 after the magic).
    let bytes = std::fs::read(&model).unwrap();
    assert_eq!(u32::from_le_bytes(bytes[8..12].try_into().unwrap()), 2);
    let chosen = out
        .lines()
        .find_map(|l| l.strip_prefix("smoothing default: "))
        .unwrap()
        .split(" (")
        .next()
        .unwrap()
        .to_string();
    let info = ok(&["info", s(&model)]);
    assert!(
        info.contains(&format!("smoothing default: {chosen} ")),
        "{chosen}\n{info}"
    );

    // eval: the table names the smoothing; --compare-smoothing scores all three.
    let cmp = t.path().join("cmp.json");
    let out = ok(&[
        "eval",
        s(&model),
        s(&mni()),
        "--compare-smoothing",
        "--json",
        s(&cmp),
        "-q",
    ]);
    assert!(out.contains("smoothed three ways"), "{out}");
    let j = json(&cmp);
    let top: Vec<&String> = j.as_object().unwrap().keys().collect();
    let methods = j["smoothing"].as_object().unwrap();
    let mut keys: Vec<&str> = methods.keys().map(String::as_str).collect();
    keys.sort();
    assert_eq!(keys, ["expansion", "meanfield", "none"]);
    // The file itself lists them in this order.
    let text = std::fs::read_to_string(&cmp).unwrap();
    let at = |k: &str| text.find(&format!("\"{k}\": {{")).unwrap();
    assert!(at("none") < at("expansion") && at("expansion") < at("meanfield"));
    for (name, r) in methods {
        for key in [
            "mean_iou",
            "boundary_f1",
            "pixel_accuracy",
            "per_class_iou",
            "per_image",
        ] {
            assert!(r.get(key).is_some(), "smoothing.{name}.{key}");
        }
        assert_eq!(r["smooth_method"], name.as_str());
        for key in &top {
            assert!(
                r.get(key.as_str()).is_some() || *key == "smoothing",
                "smoothing.{name} lacks {key}"
            );
        }
    }
    // Each column equals a plain eval with that method, at the same strength.
    let w = methods["expansion"]["smooth_strength"].as_f64().unwrap();
    assert!(w > 0.0);
    let ws = w.to_string();
    for method in ["none", "expansion", "meanfield"] {
        let one = t.path().join(format!("{method}.json"));
        ok(&[
            "eval",
            s(&model),
            s(&mni()),
            "--smooth",
            method,
            "--smooth-strength",
            &ws,
            "--json",
            s(&one),
            "-q",
        ]);
        let o = json(&one);
        assert!(o.get("smoothing").is_none());
        assert_eq!(o["mean_iou"], methods[method]["mean_iou"], "{method}");
        assert_eq!(o["boundary_f1"], methods[method]["boundary_f1"], "{method}");
        assert_eq!(o["smooth_method"], method);
    }
    // Strength 0 is no smoothing, whatever the method.
    let zero = t.path().join("zero.json");
    ok(&[
        "eval",
        s(&model),
        s(&mni()),
        "--smooth",
        "expansion",
        "--smooth-strength",
        "0",
        "--json",
        s(&zero),
        "-q",
    ]);
    assert_eq!(json(&zero)["mean_iou"], methods["none"]["mean_iou"]);

    // apply: mean-field's confidence map shows the smoothed probabilities.
    let img = mni().join("images/axial_z040.png");
    let conf = |method: &str| {
        let out = t.path().join(format!("apply-{method}"));
        let text = ok(&[
            "apply",
            s(&model),
            s(&img),
            "--out",
            s(&out),
            "--confidence",
            "--smooth",
            method,
            "-q",
        ]);
        assert!(text.contains(&format!("smoothing {method}")), "{text}");
        assert!(out.join("labels/axial_z040.png").is_file());
        image::open(out.join("confidence/axial_z040.png"))
            .unwrap()
            .to_luma8()
    };
    let (none, expansion, meanfield) = (conf("none"), conf("expansion"), conf("meanfield"));
    assert_eq!(none, expansion, "expansion smooths labels only");
    assert_ne!(none, meanfield, "mean-field smooths the probabilities too");

    // Given options fix the default and skip the search.
    let fixed = t.path().join("fixed.grove");
    let mut args = vec![
        "train",
        s(&data),
        "--model",
        s(&fixed),
        "--smooth",
        "meanfield",
        "--smooth-strength",
        "2.5",
    ];
    args.extend(SMALL);
    let out = ok(&args);
    assert!(
        out.contains("smoothing default: meanfield, strength 2.5 (as given)"),
        "{out}"
    );
    assert!(!out.contains("strength mean IoU"), "{out}");
    let out = ok(&["eval", s(&fixed), s(&mni()), "-q"]);
    assert!(out.contains("smoothing meanfield, strength 2.5"), "{out}");
}

#[test]
fn scribbles_and_a_single_image_are_said() {
    let t = tempfile::tempdir().unwrap();
    // Every fourth row labelled: 25 % of the pixels, scribble-like.
    let data = slices(&t.path().join("strokes"), 6, |y| y % 4 == 0);
    let model = t.path().join("m.grove");
    let mut args = vec!["train", s(&data), "--model", s(&model)];
    args.extend(SMALL);
    let out = ok(&args);
    assert!(out.contains("scored on the labelled strokes only"), "{out}");

    let one = slices(&t.path().join("one"), 1, |_| true);
    let mut args = vec!["train", s(&one), "--model", s(&model)];
    args.extend(SMALL);
    let out = ok(&args);
    assert!(out.contains("with one training image"), "{out}");
    assert!(
        out.contains("smoothing default: expansion, strength 3"),
        "{out}"
    );
}

#[test]
fn version_1_models_load_without_smoothing_and_score_as_before() {
    let v1 =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/model_v1/mni152-tiny-v1.grove");
    let info = ok(&["info", s(&v1)]);
    assert!(info.contains("smoothing default: none"), "{info}");
    let t = tempfile::tempdir().unwrap();
    let out = t.path().join("v1.json");
    ok(&["eval", s(&v1), s(&mni()), "--json", s(&out), "-q"]);
    let j = json(&out);
    // The scores grove 0.1.0 at commit 4b59247 gave this model (fixture README).
    assert_eq!(j["smooth_method"], "none");
    assert!((j["mean_iou"].as_f64().unwrap() - 0.9315529935324225).abs() < 1e-12);
    assert!((j["pixel_accuracy"].as_f64().unwrap() - 0.9777129038583038).abs() < 1e-12);
    assert!((j["boundary_f1"].as_f64().unwrap() - 0.9457364069534316).abs() < 1e-12);
    // It can still be smoothed on request.
    let out = ok(&["eval", s(&v1), s(&mni()), "--smooth", "expansion", "-q"]);
    assert!(out.contains("smoothing expansion, strength 3"), "{out}");
}

#[test]
fn bad_smoothing_values_are_usage_errors() {
    let v1 =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/model_v1/mni152-tiny-v1.grove");
    let t = tempfile::tempdir().unwrap();
    let img = mni().join("images/axial_z040.png");
    let out = t.path().join("out");
    let model = t.path().join("never.grove");
    for bad in ["-1", "NaN", "inf", "-0.5"] {
        for args in [
            vec!["eval", s(&v1), s(&mni()), "--smooth-strength", bad],
            vec![
                "apply",
                s(&v1),
                s(&img),
                "--out",
                s(&out),
                "--smooth-strength",
                bad,
            ],
            vec![
                "train",
                s(&mni()),
                "--model",
                s(&model),
                "--smooth-strength",
                bad,
            ],
        ] {
            let (code, _, err) = grove(&args);
            assert_eq!(code, 2, "{args:?}: {err}");
            assert!(
                err.contains(&format!("--smooth-strength {bad}")) && err.contains("≥ 0"),
                "{args:?}: {err}"
            );
            assert!(!err.contains("panicked"), "{err}");
        }
    }
    let (code, _, err) = grove(&["eval", s(&v1), s(&mni()), "--smooth", "crf"]);
    assert_eq!(code, 2);
    assert!(
        err.contains("possible values: none, expansion, meanfield"),
        "{err}"
    );
    assert!(
        !out.exists() && !model.exists(),
        "nothing written on bad values"
    );
}

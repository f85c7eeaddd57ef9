//! The HTML reports of `grove eval --report` and `grove crossval --report` in headless
//! Chromium (`tests/browser/report.mjs`, playwright-core): they load with no console errors
//! and no requests beyond the file itself, no markup from an image name runs, and the
//! tables and charts show the same numbers as the `--json` files written in the same run.
//!
//! Needs `node`, `/usr/bin/chromium` and `npm ci` in tests/browser (`.ci/run` does all three
//! and sets GROVE_REQUIRE_BROWSER=1, so CI cannot skip it); elsewhere it is skipped with a
//! note when they are missing. `GROVE_UPDATE_DOCS=1` also writes docs/report-*.png.

use std::path::{Path, PathBuf};
use std::process::Command;

use grove::demo::write_demo_dataset;
use serde_json::Value;

fn browser_ready(root: &Path) -> Result<(), String> {
    let chromium = std::env::var("GROVE_CHROMIUM").unwrap_or("/usr/bin/chromium".into());
    if !Path::new(&chromium).exists() {
        return Err(format!("{chromium} missing"));
    }
    if Command::new("node").arg("--version").output().is_err() {
        return Err("node missing".into());
    }
    if !root
        .join("tests/browser/node_modules/playwright-core")
        .is_dir()
    {
        return Err("tests/browser/node_modules missing (run npm ci there)".into());
    }
    Ok(())
}

fn grove(args: &[&str]) {
    let out = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "grove {args:?} failed:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

fn read_json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// The name of an image that is markup: the report must show it as text.
const HOSTILE: &str = "<img src=x onerror=alert(1)>";

fn close(a: &Value, b: &Value, what: &str) {
    match (a.as_f64(), b.as_f64()) {
        (Some(x), Some(y)) => assert!((x - y).abs() < 1e-9, "{what}: page {x} vs JSON {y}"),
        _ => assert!(a.is_null() && b.is_null(), "{what}: page {a} vs JSON {b}"),
    }
}

/// What every report shows, against its JSON.
fn check_common(page: &Value, json: &Value, name: &str) {
    assert_eq!(page["problems"], serde_json::json!([]), "{name}");
    assert_eq!(page["scripts"], 0, "{name}: the report has no scripts");
    assert_eq!(
        page["external"],
        serde_json::json!([]),
        "{name}: external resources"
    );
    close(
        &page["cards"]["mean-iou"],
        &json["mean_iou"],
        "mean IoU card",
    );
    close(
        &page["cards"]["pixel-accuracy"],
        &json["pixel_accuracy"],
        "pixel accuracy card",
    );
    close(
        &page["cards"]["boundary-f1"],
        &json["boundary_f1"],
        "boundary F1 card",
    );
    close(
        &page["cards"]["pixels"],
        &json["labelled_pixels"],
        "pixels card",
    );
    let classes: Vec<&str> = json["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c.as_str().unwrap())
        .collect();
    let rows = page["per_class"].as_array().unwrap();
    assert_eq!(rows.len(), classes.len(), "{name}: one row per class");
    for (row, c) in rows.iter().zip(&classes) {
        assert_eq!(row["key"], *c);
        let v = &row["values"];
        close(&v[0], &json["per_class_iou"][c], "class IoU");
        close(&v[1], &json["per_class_accuracy"][c], "class accuracy");
        close(
            &v[2],
            &json["per_class_boundary_f1"][c],
            "class boundary F1",
        );
        close(&v[3], &json["area_fraction"][c]["true"], "true area");
        close(
            &v[4],
            &json["area_fraction"][c]["predicted"],
            "predicted area",
        );
    }
    // Heat map: k × k cells holding the confusion counts.
    let cells = page["confusion"].as_array().unwrap();
    assert_eq!(cells.len(), classes.len() * classes.len());
    for cell in cells {
        let (t, p, n) = (
            cell[0].as_u64().unwrap() as usize,
            cell[1].as_u64().unwrap() as usize,
            cell[2].as_u64().unwrap(),
        );
        assert_eq!(json["confusion"][t][p].as_u64().unwrap(), n, "cell {t},{p}");
    }
    assert!(page["confusion_box"][0].as_f64().unwrap() > 200.0);
    // IoU bars: one per class with an IoU, longer for a higher IoU.
    let bars = page["iou_bars"].as_array().unwrap();
    for b in bars {
        close(
            &b[1],
            &json["per_class_iou"][b[0].as_str().unwrap()],
            "IoU bar",
        );
    }
    for w in bars.windows(2) {
        let (a, b) = (&w[0], &w[1]);
        if a[1].as_f64() > b[1].as_f64() {
            assert!(a[2].as_f64() >= b[2].as_f64(), "bar lengths follow IoU");
        }
    }
    assert!(page["importance_bars"].as_array().unwrap().len() >= 10);
    assert!(page["oob_text"].as_str().unwrap().contains("optimistic"));
    // Per image: every scored image, with its scores; one row of 5 loaded pictures each.
    let per_image = page["per_image"].as_array().unwrap();
    let json_images = json["per_image"].as_array().unwrap();
    assert_eq!(per_image.len(), json_images.len());
    for (row, j) in per_image.iter().zip(json_images) {
        assert_eq!(row["key"], j["image"]);
        close(&row["values"][0], &j["pixel_accuracy"], "image accuracy");
        close(&row["values"][1], &j["mean_iou"], "image mean IoU");
    }
    assert_eq!(
        page["thumbnail_rows"].as_array().unwrap().len(),
        json_images.len()
    );
    assert_eq!(page["images_total"], 5 * json_images.len());
    assert_eq!(
        page["images_loaded"], page["images_total"],
        "{name}: pictures load"
    );
}

#[test]
fn reports_in_headless_chromium() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    if let Err(why) = browser_ready(&root) {
        if std::env::var("GROVE_REQUIRE_BROWSER").is_ok() {
            panic!("browser test required but {why}");
        }
        eprintln!("skipping the browser test: {why}");
        return;
    }
    let t = tempfile::tempdir().unwrap();
    let (train, test) = (t.path().join("train"), t.path().join("held-out"));
    write_demo_dataset(&train, 0..6, 160, 9).unwrap();
    write_demo_dataset(&test, 6..9, 160, 9).unwrap();
    for (dir, stem) in [(&train, "farm_005"), (&test, "farm_008")] {
        for sub in ["images", "labels"] {
            std::fs::rename(
                dir.join(sub).join(format!("{stem}.png")),
                dir.join(sub).join(format!("{HOSTILE}.png")),
            )
            .unwrap();
        }
    }
    let s = |p: &Path| p.to_str().unwrap().to_string();
    let (model, eval_json, eval_html, cv_json, cv_html) = (
        t.path().join("m.grove"),
        t.path().join("eval.json"),
        t.path().join("eval.html"),
        t.path().join("cv.json"),
        t.path().join("cv.html"),
    );
    let opts = ["--trees", "12", "--textons", "16", "--seed", "2"];
    grove(&[&["train", &s(&train), "--model", &s(&model)][..], &opts].concat());
    grove(&[
        "eval",
        &s(&model),
        &s(&test),
        "--json",
        &s(&eval_json),
        "--report",
        &s(&eval_html),
    ]);
    grove(
        &[
            &["crossval", &s(&train), "--folds", "3"][..],
            &opts,
            &["--json", &s(&cv_json), "--report", &s(&cv_html)],
        ]
        .concat(),
    );

    let out = root.join("target/browser-report");
    std::fs::create_dir_all(&out).unwrap();
    let status = Command::new("node")
        .arg(root.join("tests/browser/report.mjs"))
        .arg(&out)
        .arg(format!("eval={}", s(&eval_html)))
        .arg(format!("crossval={}", s(&cv_html)))
        .current_dir(root.join("tests/browser"))
        .status()
        .unwrap();
    assert!(
        status.success(),
        "tests/browser/report.mjs failed (screenshots in {})",
        out.display()
    );

    let eval_page = read_json(&out.join("eval.json"));
    let eval = read_json(&eval_json);
    check_common(&eval_page, &eval, "eval");
    assert!(eval_page["per_image"]
        .as_array()
        .unwrap()
        .iter()
        .any(|r| r["key"] == HOSTILE && r["text"].as_str().unwrap().contains(HOSTILE)));
    let oob = grove::model::load(&model).unwrap().provenance.oob_accuracy;
    close(&eval_page["oob"], &serde_json::json!(oob), "model OOB");

    let cv_page = read_json(&out.join("crossval.json"));
    let cv = read_json(&cv_json);
    check_common(&cv_page, &cv, "crossval");
    let folds = cv["folds"].as_array().unwrap();
    let rows = cv_page["folds"].as_array().unwrap();
    assert_eq!(rows.len(), folds.len());
    for (row, f) in rows.iter().zip(folds) {
        close(&row["values"][0], &f["pixel_accuracy"], "fold accuracy");
        close(&row["values"][1], &f["mean_iou"], "fold mean IoU");
        close(&row["values"][2], &f["boundary_f1"], "fold boundary F1");
        close(&row["values"][3], &f["oob_accuracy"], "fold OOB");
        for img in f["images"].as_array().unwrap() {
            let name = img.as_str().unwrap();
            assert!(
                row["text"].as_str().unwrap().contains(name),
                "fold lists {name}"
            );
        }
    }
    let sm = &cv["summary"];
    close(
        &cv_page["fold_mean"][0],
        &sm["pixel_accuracy"]["mean"],
        "mean accuracy",
    );
    close(
        &cv_page["fold_mean"][1],
        &sm["mean_iou"]["mean"],
        "mean of mean IoU",
    );
    close(&cv_page["oob"], &sm["oob_accuracy"]["mean"], "mean OOB");
    for row in cv_page["fold_classes"].as_array().unwrap() {
        let c = row["key"].as_str().unwrap();
        let vals = row["values"].as_array().unwrap();
        close(
            vals.last().unwrap(),
            &sm["per_class_iou"][c]["mean"],
            "class IoU mean",
        );
    }
}

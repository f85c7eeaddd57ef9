//! The workspace end to end in headless Chromium (`tests/browser/workspace.mjs`, driven by
//! playwright-core): classes made in the page, strokes painted with mouse events, saved,
//! trained, layers and scores shown, the server killed and restarted. This file prepares the
//! dataset (demo scenes without their labels, a 4000 × 3000 scene, an image with a hostile
//! name) and the stroke plan, runs the script, then checks with grove's own dataset reader
//! that the label files on disk hold exactly the painted pixels.
//!
//! Needs `node`, `/usr/bin/chromium` and `npm ci` in tests/browser (`.ci/run` does all three
//! and sets GROVE_REQUIRE_BROWSER=1, so CI cannot skip it); elsewhere it is skipped with a
//! note when they are missing. `GROVE_UPDATE_DOCS=1` also writes docs/workspace-*.png, from a run
//! without the markup-named image and class (the screenshots are for readers).

use std::path::{Path, PathBuf};
use std::process::Command;

use grove::dataset::{ClassTable, Dataset, LabelOptions, UNLABELLED};
use grove::demo::{render_scene, DEMO_CLASSES_TOML};
use serde_json::{json, Value};

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

/// Demo classes in the page's order: the stroke plan uses these indices.
fn demo_table() -> ClassTable {
    ClassTable::parse(DEMO_CLASSES_TOML, 255).unwrap()
}

/// A horizontal stroke of `len` px at least `margin` px inside one class of `truth`, or None;
/// scanned row by row from the top, or from the bottom when `from_bottom`.
fn find_stroke(
    truth: &[u8],
    w: usize,
    h: usize,
    id: u8,
    len: usize,
    margin: usize,
    from_bottom: bool,
) -> Option<[usize; 2]> {
    let inside = |x: usize, y: usize| {
        for yy in y.saturating_sub(margin)..(y + margin + 1).min(h) {
            for xx in x.saturating_sub(margin)..(x + len + margin + 1).min(w) {
                if truth[yy * w + xx] != id {
                    return false;
                }
            }
        }
        true
    };
    let mut rows: Vec<usize> = (margin..h - margin).step_by(7).collect();
    if from_bottom {
        rows.reverse();
    }
    for y in rows {
        for x in (margin..w.saturating_sub(len + margin)).step_by(7) {
            if inside(x, y) {
                return Some([x, y]);
            }
        }
    }
    None
}

/// Up to two strokes per class of `table` (its order = the page's class keys), each inside that
/// class's ground-truth region `truth` (w × h class ids).
fn strokes_inside(truth: &[u8], w: usize, h: usize, table: &ClassTable) -> Vec<Value> {
    let mut strokes = Vec::new();
    for (index, c) in table.classes().iter().enumerate() {
        let top = find_stroke(truth, w, h, c.id, 36, 7, false);
        let bottom = find_stroke(truth, w, h, c.id, 36, 7, true);
        for [x, y] in top
            .into_iter()
            .chain(bottom.filter(|b| top.is_some_and(|t| t[1].abs_diff(b[1]) > 20)))
        {
            strokes.push(json!({"class": index, "size": 8, "points": [[x, y], [x + 18, y + 1], [x + 36, y]]}));
        }
    }
    strokes
}

/// A 4000 × 3000 scene for the zoom / pan / brush timings: a 1000 × 750 scene enlarged 4× (a
/// full-size render would take most of the test's time budget).
fn write_big_scene(path: &Path, seed: u64) {
    let small = render_scene(seed, 99, 1000, 750);
    let mut big = vec![0u8; 4000 * 3000 * 3];
    for (i, px) in big.chunks_exact_mut(3).enumerate() {
        let (x, y) = ((i % 4000) / 4, (i / 4000) / 4);
        px.copy_from_slice(&small.rgb[(y * 1000 + x) * 3..(y * 1000 + x) * 3 + 3]);
    }
    grove::imageio::write_rgb_png(path, 4000, 3000, &big).unwrap();
}

/// The class table as the page is given it (names and colours in key order).
fn page_classes(table: &ClassTable) -> Vec<Value> {
    table
        .classes()
        .iter()
        .map(|c| json!({"name": c.name, "color": grove::dataset::classes::hex_colour(c.color)}))
        .collect()
}

/// Writes the dataset and returns the stroke plan: per image, strokes of the demo classes
/// placed inside their ground-truth regions (as a user would scribble them).
/// `hostile` adds an image and a class whose names are markup (left out only when the run
/// makes the README's screenshots).
fn prepare(data: &Path, hostile: bool) -> Value {
    let images = data.join("images");
    std::fs::create_dir_all(&images).unwrap();
    let table = demo_table();
    let mut plan = Vec::new();
    for i in 0..7u32 {
        let s = render_scene(5, i, 256, 256);
        let name = format!("farm_{i:02}");
        grove::imageio::write_rgb_png(&images.join(format!("{name}.png")), 256, 256, &s.rgb)
            .unwrap();
        plan.push(json!({"image": name, "strokes": strokes_inside(&s.labels, 256, 256, &table)}));
    }
    write_big_scene(&images.join("big_field.png"), 5);
    // An image whose name is markup: the page must show it as text.
    if hostile {
        std::fs::copy(
            images.join("farm_06.png"),
            images.join("<img src=x onerror=alert(2)>.png"),
        )
        .unwrap();
    }
    json!({
        "classes": page_classes(&table),
        "hostile_class": hostile.then_some("<img src=x onerror=alert(1)><script>alert(3)"),
        "images": plan,
    })
}

/// Distance from pixel centre (x+.5, y+.5) to the polyline.
fn distance(px: f64, py: f64, pts: &[[f64; 2]]) -> f64 {
    let mut best = f64::MAX;
    for w in pts.windows(2) {
        let ([ax, ay], [bx, by]) = (w[0], w[1]);
        let (dx, dy) = (bx - ax, by - ay);
        let t = (((px - ax) * dx + (py - ay) * dy) / (dx * dx + dy * dy)).clamp(0.0, 1.0);
        best = best.min((px - ax - t * dx).hypot(py - ay - t * dy));
    }
    best
}

#[test]
fn workspace_in_headless_chromium() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    if let Err(why) = browser_ready(&root) {
        if std::env::var("GROVE_REQUIRE_BROWSER").is_ok() {
            panic!("browser test required but {why}");
        }
        eprintln!("skipping the browser test: {why}");
        return;
    }
    let t = tempfile::tempdir().unwrap();
    let data = t.path().join("fields");
    let hostile = std::env::var_os("GROVE_UPDATE_DOCS").is_none();
    let plan = prepare(&data, hostile);
    let plan_path = t.path().join("plan.json");
    std::fs::write(&plan_path, plan.to_string()).unwrap();
    let out = root.join("target/browser-workspace");
    std::fs::create_dir_all(&out).unwrap();
    let status = Command::new("node")
        .arg(root.join("tests/browser/workspace.mjs"))
        .args([
            env!("CARGO_BIN_EXE_grove"),
            data.to_str().unwrap(),
            plan_path.to_str().unwrap(),
            out.to_str().unwrap(),
        ])
        .current_dir(root.join("tests/browser"))
        .status()
        .unwrap();
    assert!(
        status.success(),
        "tests/browser/workspace.mjs failed (screenshots in {})",
        out.display()
    );

    // What the page painted (dumped by the script) is exactly what grove reads from disk.
    let result: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("result.json")).unwrap()).unwrap();
    let ds = Dataset::open(&data, LabelOptions::default()).unwrap();
    let expected_classes = if hostile { 6 } else { 5 };
    assert_eq!(
        ds.classes.len(),
        expected_classes,
        "five classes and the hostile one"
    );
    let painted = result["painted"].as_object().unwrap();
    assert!(painted.len() >= 3);
    // After training the page offered the regions `grove suggest` ranks highest and the
    // button moved the view to them (checked in the script).
    assert!(result["regions"].as_u64().unwrap() >= 1, "{result}");
    for (name, dump) in painted {
        let expected = std::fs::read(out.join(dump.as_str().unwrap())).unwrap();
        let entry = ds.entries.iter().find(|e| &e.stem == name).unwrap();
        let (_, labels) = ds.load_pair(entry).unwrap();
        assert_eq!(
            labels.indices, expected,
            "{name}: label file differs from the painted map"
        );
        // And the painted map is the plan's strokes: inside each stroke (radius − 1.5 px)
        // its class; nothing labelled farther than radius + 1.5 px from a stroke.
        let Some(p) = plan["images"]
            .as_array()
            .unwrap()
            .iter()
            .find(|p| p["image"] == name.as_str())
        else {
            continue;
        };
        if result["extra_strokes"]
            .as_array()
            .unwrap()
            .iter()
            .any(|n| n == name.as_str())
        {
            continue;
        }
        let strokes: Vec<(u8, f64, Vec<[f64; 2]>)> = p["strokes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|s| {
                let pts = s["points"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|q| [q[0].as_f64().unwrap() + 0.5, q[1].as_f64().unwrap() + 0.5])
                    .collect();
                (
                    s["class"].as_u64().unwrap() as u8,
                    s["size"].as_f64().unwrap() / 2.0,
                    pts,
                )
            })
            .collect();
        for (i, &v) in labels.indices.iter().enumerate() {
            let (x, y) = ((i % 256) as f64 + 0.5, (i / 256) as f64 + 0.5);
            let near: Vec<&(u8, f64, Vec<[f64; 2]>)> = strokes
                .iter()
                .filter(|(_, r, pts)| distance(x, y, pts) <= r + 1.5)
                .collect();
            if v == UNLABELLED {
                assert!(
                    strokes
                        .iter()
                        .all(|(_, r, pts)| distance(x, y, pts) > r - 1.5),
                    "{name}: pixel {i} inside a stroke is unlabelled"
                );
            } else {
                assert!(
                    near.iter().any(|(c, _, _)| *c == v),
                    "{name}: pixel {i} labelled {v} away from any stroke of that class"
                );
            }
        }
    }
    let model = grove::model::load(&data.join("model.grove")).unwrap();
    assert!(model.provenance.training_images.len() >= 3);
}

/// Not a test: the workspace's timings for the README (`benches/workspace.sh` runs it, one run,
/// figures printed, nothing asserted about time; see the preamble of benches/). On the demo
/// scenes `grove demo` makes (seed 7, 384 px): from `grove label` on images only to the first
/// prediction layer, with the class table made and strokes painted in the page by the script
/// (tests/browser/measure.mjs); the brush on a 4000 × 3000 image; and a training of 20 fully
/// labelled demo images from the page alternating with `grove train` on the same folder.
#[test]
#[ignore = "a measurement: benches/workspace.sh"]
fn measure_workspace() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    browser_ready(&root).unwrap();
    let t = tempfile::tempdir().unwrap();
    let grove = env!("CARGO_BIN_EXE_grove");
    // 1. A new dataset: six demo images, no labels, no class table.
    let fresh = t.path().join("fresh");
    let table = demo_table();
    let mut plan = Vec::new();
    for i in 0..6u32 {
        let s = render_scene(7, i, 384, 384);
        let name = format!("farm_{i:03}");
        grove::imageio::write_rgb_png(
            &fresh.join("images").join(format!("{name}.png")),
            384,
            384,
            &s.rgb,
        )
        .unwrap();
        plan.push(json!({"image": name, "strokes": strokes_inside(&s.labels, 384, 384, &table)}));
    }
    let big_path = t.path().join("big_field.png");
    write_big_scene(&big_path, 7);
    // 2. Twenty labelled demo images, trained by the page and by the command.
    let full = t.path().join("demo20");
    grove::demo::write_demo_dataset(&full, 0..20, 384, 7).unwrap();
    let plan_path = t.path().join("plan.json");
    let plan = json!({"classes": page_classes(&table), "images": plan});
    std::fs::write(&plan_path, plan.to_string()).unwrap();
    let out = root.join("target/browser-measure");
    std::fs::create_dir_all(&out).unwrap();
    let status = Command::new("node")
        .arg(root.join("tests/browser/measure.mjs"))
        .args([grove, fresh.to_str().unwrap(), plan_path.to_str().unwrap()])
        .args([
            big_path.to_str().unwrap(),
            full.to_str().unwrap(),
            out.to_str().unwrap(),
        ])
        .current_dir(root.join("tests/browser"))
        .status()
        .unwrap();
    assert!(status.success(), "tests/browser/measure.mjs failed");
    let page: Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("measure.json")).unwrap()).unwrap();
    let median = |v: &Value| {
        let mut x: Vec<f64> = v
            .as_array()
            .unwrap()
            .iter()
            .map(|s| s.as_f64().unwrap())
            .collect();
        x.sort_by(f64::total_cmp);
        let n = x.len();
        (x[(n - 1) / 2] + x[n / 2]) / 2.0
    };
    let (page_train, cli) = (
        median(&page["page_train_seconds"]),
        median(&page["cli_train_seconds"]),
    );
    // The machine is shared: the load says how much the figures are worth.
    let load = std::fs::read_to_string("/proc/loadavg").unwrap_or_default();
    println!(
        "load average (1, 5, 15 min) at the end: {}",
        load.split_whitespace()
            .take(3)
            .collect::<Vec<_>>()
            .join(" ")
    );
    println!(
        "grove label → first prediction layer (scripted user): {:.1} s",
        page["first_prediction_seconds"]
    );
    println!(
        "  of which training (server): {:.1} s",
        page["first_train_seconds"]
    );
    println!("brush on 4000 × 3000: {}", page["brush"]);
    println!(
        "train 20 demo images, alternating: page {} s (click → model shown), of which the server's training {} s; grove train {} s; median page / median CLI = {:.2}, server / CLI = {:.2}",
        page["page_train_seconds"],
        page["server_train_seconds"],
        page["cli_train_seconds"],
        page_train / cli,
        median(&page["server_train_seconds"]) / cli
    );
}

//! Through the binary: `apply`'s area figures (areas.csv / areas.json: counts agree with the
//! label maps it wrote, the ROI restricts counting, the pixel size gives areas), its
//! uncertainty maps, and `suggest`.

use std::path::Path;
use std::process::Command;

fn grove(args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap()
}

fn ok(args: &[&str]) {
    let out = grove(args);
    assert!(
        out.status.success(),
        "grove {args:?} failed:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

fn s(p: &Path) -> String {
    p.to_str().unwrap().to_string()
}

#[test]
fn apply_writes_area_tables_that_match_its_label_maps() {
    let t = tempfile::tempdir().unwrap();
    let root = t.path();
    grove::demo::write_demo_dataset(&root.join("d"), 0..3, 96, 5).unwrap();
    let model = root.join("m.grove");
    ok(&[
        "train",
        &s(&root.join("d")),
        "--model",
        &s(&model),
        "--trees",
        "4",
        "--textons",
        "4",
        "--quiet",
    ]);
    let out = root.join("out");
    ok(&[
        "apply",
        &s(&model),
        &s(&root.join("d")),
        "--out",
        &s(&out),
        "--pixel-size",
        "2.5um",
    ]);
    let table = grove::eval::areas::AreaTable::read(&out.join("areas.csv")).unwrap();
    assert_eq!(
        table,
        grove::eval::areas::AreaTable::read(&out.join("areas.json")).unwrap()
    );
    assert_eq!(table.pixel_size().unwrap().to_string(), "2.5um");
    let classes = grove::dataset::ClassTable::load(&out.join("classes.toml"), 255).unwrap();
    let map = grove::dataset::labels::read_labels(
        &out.join("labels/farm_001.png"),
        &classes,
        &Default::default(),
    )
    .unwrap();
    let mut expect = vec![0u64; classes.len()];
    for &c in &map.indices {
        expect[c as usize] += 1;
    }
    assert_eq!(table.counts_of("farm_001").unwrap(), &expect[..]);
    let csv = std::fs::read_to_string(out.join("areas.csv")).unwrap();
    assert!(csv.starts_with("image,class,pixels,fraction,area,unit\n"));
    assert_eq!(
        csv.lines().filter(|l| l.starts_with("ALL,")).count(),
        classes.len()
    );
    assert!(csv.contains(",um2\n"));

    // ROI: the left half of every image; fractions are of the ROI.
    let roi = root.join("roi");
    std::fs::create_dir_all(&roi).unwrap();
    for stem in ["farm_000", "farm_001", "farm_002"] {
        let mask =
            image::GrayImage::from_fn(96, 96, |x, _| image::Luma([if x < 48 { 255 } else { 0 }]));
        mask.save(roi.join(format!("{stem}.png"))).unwrap();
    }
    let out2 = root.join("out2");
    ok(&[
        "apply",
        &s(&model),
        &s(&root.join("d")),
        "--out",
        &s(&out2),
        "--roi",
        &s(&roi),
        "--no-overlay",
    ]);
    let t2 = grove::eval::areas::AreaTable::read(&out2.join("areas.json")).unwrap();
    let mut left = vec![0u64; classes.len()];
    for (i, &c) in map.indices.iter().enumerate() {
        if i % 96 < 48 {
            left[c as usize] += 1;
        }
    }
    assert_eq!(t2.counts_of("farm_001").unwrap(), &left[..]);
    assert_eq!(t2.totals().iter().sum::<u64>(), 3 * 48 * 96);

    // A missing mask is refused before anything is written.
    std::fs::remove_file(roi.join("farm_002.png")).unwrap();
    let out3 = root.join("out3");
    let r = grove(&[
        "apply",
        &s(&model),
        &s(&root.join("d")),
        "--out",
        &s(&out3),
        "--roi",
        &s(&roi),
    ]);
    assert!(!r.status.success());
    assert!(String::from_utf8_lossy(&r.stderr).contains("no ROI mask for image 'farm_002'"));
    assert!(!out3.exists());
}

#[test]
fn uncertainty_maps_and_suggestions() {
    let t = tempfile::tempdir().unwrap();
    let root = t.path();
    grove::demo::write_demo_dataset(&root.join("d"), 0..2, 96, 9).unwrap();
    let model = root.join("m.grove");
    ok(&[
        "train",
        &s(&root.join("d")),
        "--model",
        &s(&model),
        "--trees",
        "4",
        "--textons",
        "4",
        "--quiet",
    ]);
    // A pool: one unlabelled copy of the scenes, one with the left half of its labels.
    grove::demo::write_demo_dataset(&root.join("pool"), 2..5, 96, 9).unwrap();
    let half = root.join("pool/labels/farm_003.png");
    let classes = grove::dataset::ClassTable::load(&root.join("pool/classes.toml"), 255).unwrap();
    let lab = grove::dataset::labels::read_labels(&half, &classes, &Default::default()).unwrap();
    let ids: Vec<u8> = lab
        .indices
        .iter()
        .enumerate()
        .map(|(i, &c)| {
            if i % 96 < 48 {
                classes.classes()[c as usize].id
            } else {
                255
            }
        })
        .collect();
    grove::imageio::write_label_png(&half, 96, 96, &ids, &classes.palette()).unwrap();
    for f in ["farm_002.png", "farm_004.png"] {
        std::fs::remove_file(root.join("pool/labels").join(f)).unwrap();
    }

    let out = root.join("out");
    ok(&[
        "apply",
        &s(&model),
        &s(&root.join("pool")),
        "--out",
        &s(&out),
        "--uncertainty",
    ]);
    for map in ["margin", "entropy"] {
        let img = image::open(out.join("uncertainty").join(map).join("farm_002.png")).unwrap();
        assert_eq!((img.width(), img.height()), (96, 96));
    }

    let json = root.join("s.json");
    ok(&[
        "suggest",
        &s(&model),
        &s(&root.join("pool")),
        "--top",
        "2",
        "--out",
        &s(&root.join("sug")),
        "--json",
        &s(&json),
        "--threshold",
        "0.2",
    ]);
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let images = v["images"].as_array().unwrap();
    assert_eq!(images.len(), 2);
    assert!(images[0]["score"].as_f64().unwrap() >= images[1]["score"].as_f64().unwrap());
    for im in images {
        let name = im["image"].as_str().unwrap();
        assert!(root.join("sug").join(format!("{name}.png")).is_file());
        for r in im["regions"].as_array().unwrap() {
            for key in ["x", "y", "width", "height", "pixels"] {
                assert!(r[key].as_u64().is_some(), "{key}");
            }
            assert!(r["classes"].as_array().unwrap().len() >= 2);
            if name == "farm_003" {
                // The labelled left half is known: no region starts there.
                assert!(r["x"].as_u64().unwrap() >= 48, "{r}");
            }
        }
    }
    let bad = grove(&[
        "suggest",
        &s(&model),
        &s(&root.join("pool")),
        "--out",
        "x",
        "--top",
        "0",
    ]);
    assert!(String::from_utf8_lossy(&bad.stderr).contains("--top must be at least 1"));
}

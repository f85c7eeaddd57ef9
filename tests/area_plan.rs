//! `grove areas --plan`: a stratified sample plan over the maps which, filled in with true
//! classes, is a valid `--reference` (Olofsson et al. 2014, RSE 148:42–57; the estimator
//! itself is checked against lulc-validation in tests/area_estimate.rs).

#[path = "support/run.rs"]
mod run;
use run::grove;

#[test]
fn plan_then_fill_in_then_estimate() {
    let t = tempfile::tempdir().unwrap();
    let demo = t.path().join("demo");
    let d = demo.to_str().unwrap();
    let (code, _, err) = grove(&["demo", "--images", "3", "--size", "96", "--out", d]);
    assert_eq!(code, 0, "{err}");
    let maps = demo.join("predictions");
    let plan = t.path().join("plan");
    let (m, p) = (maps.to_str().unwrap(), plan.to_str().unwrap());
    let (code, out, err) = grove(&["areas", m, "--plan", "60", "--out", p, "--seed", "4"]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("60 sample pixels over 3 maps"), "{out}");

    // points.csv lists exactly the white pixels of the label PNGs, each of its map class.
    let csv = std::fs::read_to_string(plan.join("points.csv")).unwrap();
    let rows: Vec<Vec<&str>> = csv
        .lines()
        .skip(1)
        .map(|l| l.split(',').collect())
        .collect();
    assert_eq!(rows.len(), 60);
    let mut white = 0;
    for e in std::fs::read_dir(plan.join("labels")).unwrap() {
        let img = image::open(e.unwrap().path()).unwrap().to_rgba8();
        white += img.pixels().filter(|p| p.0 == [255; 4]).count();
        assert!(img.pixels().all(|p| p.0 == [255; 4] || p.0[3] == 0));
    }
    assert_eq!(white, 60);
    // Same seed, same plan.
    let again = t.path().join("again");
    grove(&[
        "areas",
        m,
        "--plan",
        "60",
        "--out",
        again.to_str().unwrap(),
        "--seed",
        "4",
    ]);
    assert_eq!(
        csv,
        std::fs::read_to_string(again.join("points.csv")).unwrap()
    );

    // Unfilled, the plan holds no reference pixels: refused, naming the folder.
    let (code, _, err) = grove(&["areas", m, "--reference", p]);
    assert_ne!(code, 0);
    assert!(err.contains("plan/labels"), "{err}");

    // Filled in from the ground truth (what the user would paint), it is a reference.
    for r in &rows {
        let (stem, x, y) = (
            r[0],
            r[1].parse::<u32>().unwrap(),
            r[2].parse::<u32>().unwrap(),
        );
        let truth = ["train", "test"]
            .iter()
            .map(|s| demo.join(s).join("labels").join(format!("{stem}.png")))
            .find(|p| p.is_file())
            .unwrap();
        let colour = image::open(&truth).unwrap().to_rgba8().get_pixel(x, y).0;
        let path = plan.join("labels").join(format!("{stem}.png"));
        let mut img = image::open(&path).unwrap().to_rgba8();
        img.put_pixel(x, y, image::Rgba(colour));
        img.save(&path).unwrap();
    }
    let json = t.path().join("est.json");
    let (code, out, err) = grove(&[
        "areas",
        m,
        "--reference",
        p,
        "--json",
        json.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("60 reference pixels"), "{out}");
    let v: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let total: f64 = v["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["proportion"].as_f64().unwrap())
        .sum();
    assert!((total - 1.0).abs() < 1e-9, "proportions sum to 1: {total}");

    // Mistakes: --plan without --out, --plan with --reference, --plan 0.
    for bad in [
        vec!["areas", m, "--plan", "10"],
        vec!["areas", m, "--plan", "10", "--out", p, "--reference", p],
        vec!["areas", m, "--plan", "0", "--out", p],
    ] {
        let (code, _, err) = grove(&bad);
        assert_eq!(code, 2, "{bad:?}: {err}");
    }
}

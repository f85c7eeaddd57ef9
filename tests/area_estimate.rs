//! The stratified area estimator against outside references: the worked example of
//! Olofsson et al. (2014, RSE 148:42–57, section 5; figures from memory, reproduced exactly)
//! and the PyPI package lulc-validation 0.0.4 (accuracies and their standard errors), both in
//! `tests/fixtures/areas/olofsson2014.json` (made by `make_areas_fixture.py` there).

use grove::eval::area_estimate::{estimate, ErrorMatrix};

#[test]
fn olofsson_2014_worked_example() {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/areas/olofsson2014.json"
    );
    let f: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap();
    let names: Vec<String> = f["classes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().into())
        .collect();
    let map_pixels: Vec<u64> = f["map_pixels"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_u64().unwrap())
        .collect();
    let counts: Vec<Vec<u64>> = f["counts"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            r.as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_u64().unwrap())
                .collect()
        })
        .collect();
    let m = ErrorMatrix { counts };
    let e = estimate(&names, &map_pixels, &m, Some((0.09, "ha")));
    let num = |key: &str, i: usize| f[key][i].as_f64().unwrap();
    let close =
        |a: f64, b: f64, tol: f64, what: &str| assert!((a - b).abs() <= tol, "{what}: {a} vs {b}");
    // lulc-validation (Stehman 2014 estimators, finite population correction included).
    close(
        e.overall_accuracy,
        f["overall_accuracy"].as_f64().unwrap(),
        1e-12,
        "overall accuracy",
    );
    let oa_se = (e.overall_accuracy_ci95[1] - e.overall_accuracy) / 1.96;
    close(
        oa_se,
        f["overall_accuracy_se"].as_f64().unwrap(),
        1e-9,
        "overall accuracy SE",
    );
    for (i, c) in e.classes.iter().enumerate() {
        close(
            c.users_accuracy.unwrap(),
            num("users_accuracy", i),
            1e-12,
            "user's",
        );
        close(
            c.producers_accuracy.unwrap(),
            num("producers_accuracy", i),
            1e-12,
            "producer's",
        );
        let u_se = (c.users_accuracy_ci95.unwrap()[1] - c.users_accuracy.unwrap()) / 1.96;
        close(u_se, num("users_accuracy_se", i), 1e-9, "user's SE");
        let p_se = (c.producers_accuracy_ci95.unwrap()[1] - c.producers_accuracy.unwrap()) / 1.96;
        close(p_se, num("producers_accuracy_se", i), 1e-6, "producer's SE");
    }
    // The paper's area figures (ha, from memory), to its rounding.
    let paper = &f["paper_area_ha_from_memory"];
    for (i, name) in names.iter().enumerate() {
        close(e.classes[i].area, paper[name].as_f64().unwrap(), 0.5, name);
    }
    let half = (e.classes[0].area_ci95[1] - e.classes[0].area_ci95[0]) / 2.0;
    close(
        half,
        paper["deforestation_ci95_halfwidth"].as_f64().unwrap(),
        1.0,
        "deforestation CI",
    );
}

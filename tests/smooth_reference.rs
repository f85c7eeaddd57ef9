//! The smoothing solvers against outside references (fixtures in `tests/fixtures/smooth/`, made
//! by `make_smooth_fixtures.py` with the library versions in `versions.txt`):
//! * grid max-flow vs PyMaxflow (Boykov–Kolmogorov's own implementation) and networkx
//!   (preflow-push): the flow values must be equal, exactly, and our cut must cost the flow;
//! * alpha-expansion vs gco (Veksler & Delong's graph-cut library, through gco-wrapper) on
//!   random multi-label Potts problems: our final energy within 1 % of gco's or below it, and
//!   never increasing from move to move.

use grove::smooth::expansion::alpha_expansion;
use grove::smooth::maxflow::{GridMaxFlow, Segment};
use grove::smooth::{Connectivity, PottsEnergy};
use serde_json::Value;

/// Forward direction k of the fixtures (E, S, SE, SW) in the max-flow's direction numbering.
const GRID_DIR: [usize; 4] = [0, 2, 4, 6];
const FORWARD: [(isize, isize); 4] = [(1, 0), (0, 1), (1, 1), (-1, 1)];

fn load(name: &str) -> Vec<Value> {
    let path = format!(
        "{}/tests/fixtures/smooth/{name}",
        env!("CARGO_MANIFEST_DIR")
    );
    let text = std::fs::read_to_string(&path).expect("fixture present");
    let v: Value = serde_json::from_str(&text).expect("fixture is JSON");
    v["cases"].as_array().expect("cases").clone()
}

fn ints(v: &Value) -> Vec<i64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_i64().expect("integer"))
        .collect()
}

fn dims(case: &Value) -> (usize, usize, Connectivity) {
    let w = case["width"].as_u64().unwrap() as usize;
    let h = case["height"].as_u64().unwrap() as usize;
    let conn = match case["connectivity"].as_u64().unwrap() {
        4 => Connectivity::Four,
        _ => Connectivity::Eight,
    };
    (w, h, conn)
}

#[test]
fn max_flow_equals_pymaxflow_and_networkx() {
    let cases = load("maxflow.json");
    assert!(cases.len() >= 20);
    for (i, case) in cases.iter().enumerate() {
        let (w, h, conn) = dims(case);
        let (source, sink, edges) = (
            ints(&case["source"]),
            ints(&case["sink"]),
            ints(&case["edges"]),
        );
        let mut g = GridMaxFlow::new(w, h, conn);
        for y in 0..h {
            for x in 0..w {
                let p = y * w + x;
                g.add_terminal(x, y, source[p] as i32, sink[p] as i32);
                for (k, &dir) in GRID_DIR.iter().enumerate() {
                    let (f, b) = (edges[(p * 4 + k) * 2], edges[(p * 4 + k) * 2 + 1]);
                    if f != 0 || b != 0 {
                        g.add_edge(x, y, dir, f as i32, b as i32);
                    }
                }
            }
        }
        let flow = g.max_flow();
        assert_eq!(
            flow,
            case["flow_pymaxflow"].as_i64().unwrap(),
            "case {i} ({w}x{h}): PyMaxflow"
        );
        if let Some(nx) = case.get("flow_networkx") {
            assert_eq!(flow, nx.as_i64().unwrap(), "case {i}: networkx");
        }
        // The cut we report costs exactly the flow (max-flow = min-cut).
        let sink_side = |p: usize| g.segment(p % w, p / w) == Segment::Sink;
        let mut cut = 0i64;
        for y in 0..h {
            for x in 0..w {
                let p = y * w + x;
                cut += if sink_side(p) { source[p] } else { sink[p] };
                for (k, &(dx, dy)) in FORWARD.iter().enumerate() {
                    let (f, b) = (edges[(p * 4 + k) * 2], edges[(p * 4 + k) * 2 + 1]);
                    if f == 0 && b == 0 {
                        continue;
                    }
                    let q = ((y as isize + dy) as usize) * w + (x as isize + dx) as usize;
                    match (sink_side(p), sink_side(q)) {
                        (false, true) => cut += f,
                        (true, false) => cut += b,
                        _ => {}
                    }
                }
            }
        }
        assert_eq!(cut, flow, "case {i}: cut cost");
    }
}

#[test]
fn expansion_reaches_gco_energy() {
    let cases = load("potts.json");
    assert!(cases.len() >= 20);
    let (mut below, mut equal, mut worst) = (0, 0, 0.0f64);
    for (i, case) in cases.iter().enumerate() {
        let (w, h, conn) = dims(case);
        let n_labels = case["labels"].as_u64().unwrap() as usize;
        let unary = ints(&case["unary"]).into_iter().map(|v| v as f32).collect();
        let weights = ints(&case["weights"])
            .into_iter()
            .map(|v| v as f32)
            .collect();
        let e = PottsEnergy::new(w, h, n_labels, conn, unary, weights);
        let gco = case["energy_gco"].as_i64().unwrap() as f64;
        let r = alpha_expansion(&e);
        assert_eq!(r.energy, e.energy(&r.labels));
        assert!(
            r.history.windows(2).all(|p| p[1] <= p[0]),
            "case {i}: energy rose between moves: {:?}",
            r.history
        );
        assert!(
            r.energy <= 1.01 * gco,
            "case {i} ({w}x{h}, {n_labels} labels): {} vs gco {gco}",
            r.energy
        );
        worst = worst.max(r.energy / gco);
        if r.energy < gco {
            below += 1;
        } else if r.energy == gco {
            equal += 1;
        }
    }
    eprintln!(
        "alpha-expansion vs gco on {} problems: {below} lower, {equal} equal, worst ratio {worst:.5}",
        cases.len()
    );
}

//! Gaussian filters and the filter bank against scipy.ndimage (fixtures made by
//! `tests/fixtures/filters/make_filter_fixtures.py`, which records the numpy/scipy versions).
//!
//! Tolerance: 1e-3 of the largest |value| of each scipy output. grove accumulates in f32 while
//! scipy works in float64; for kernels of up to 65 taps on values ~100 the f32 rounding is
//! ~1e-6 relative, so 1e-3 leaves ample room while still catching any wrong kernel weight,
//! normalisation, sign or edge rule (those give errors of several percent or more). Interior
//! pixels (farther than 4σ from every border, untouched by edge handling) and border pixels
//! (scipy mode 'reflect') are checked separately so a failure says which part is wrong; both
//! match to the same tolerance.

use std::path::PathBuf;

use grove::features::bank::{filter_bank, filter_bank_names, FilterBankConfig};
use grove::features::gaussian::{derivatives, gaussian, GaussianDerivatives};
use grove::Plane;

struct Fixture {
    header: serde_json::Value,
    data: Vec<f32>,
}

impl Fixture {
    fn load() -> Self {
        let dir = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/filters");
        let header: serde_json::Value =
            serde_json::from_slice(&std::fs::read(dir.join("filters.json")).unwrap()).unwrap();
        let bytes = std::fs::read(dir.join("filters.f32")).unwrap();
        let data = bytes
            .chunks_exact(4)
            .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
            .collect();
        Fixture { header, data }
    }

    fn get(&self, image: &str, name: &str, sigma: f64) -> Plane {
        let a = self.header["arrays"]
            .as_array()
            .unwrap()
            .iter()
            .find(|a| {
                a["image"] == image && a["name"] == name && a["sigma"].as_f64() == Some(sigma)
            })
            .unwrap_or_else(|| panic!("fixture {image}/{name}/σ{sigma} missing"));
        let (w, h) = (
            a["width"].as_u64().unwrap() as usize,
            a["height"].as_u64().unwrap() as usize,
        );
        let off = a["offset"].as_u64().unwrap() as usize;
        Plane::from_vec(w, h, self.data[off..off + w * h].to_vec())
    }

    fn sigmas(&self, image: &str) -> Vec<f64> {
        let mut s: Vec<f64> = self.header["arrays"]
            .as_array()
            .unwrap()
            .iter()
            .filter(|a| a["image"] == image && a["name"] == "gaussian_filter")
            .map(|a| a["sigma"].as_f64().unwrap())
            .collect();
        s.dedup();
        s
    }
}

/// Compares `got` with scipy's `want`; returns the number of interior and border pixels checked.
fn check(got: &Plane, want: &Plane, sigma: f64, what: &str) -> (usize, usize) {
    assert_eq!(
        (got.width, got.height),
        (want.width, want.height),
        "{what}: size"
    );
    let tol = 1e-3
        * want
            .data
            .iter()
            .fold(0f32, |m, v| m.max(v.abs()))
            .max(1e-12);
    let margin = (4.0 * sigma + 0.5) as usize; // kernel radius: pixels nearer see the edge rule
    let (mut interior, mut border) = (0, 0);
    let mut worst = 0f32;
    for y in 0..want.height {
        for x in 0..want.width {
            let inside =
                x >= margin && y >= margin && x + margin < want.width && y + margin < want.height;
            let (g, s) = (got.get(x, y), want.get(x, y));
            let part = if inside {
                "interior"
            } else {
                "border (reflect)"
            };
            assert!(
                (g - s).abs() <= tol,
                "{what} σ{sigma}: {part} pixel ({x},{y}): grove {g} vs scipy {s} (tol {tol})"
            );
            worst = worst.max((g - s).abs() / tol);
            if inside {
                interior += 1;
            } else {
                border += 1;
            }
        }
    }
    // Visible with --nocapture: how much of the tolerance was used (1.0 = all of it).
    eprintln!("{what} σ{sigma}: worst error {:.1e} of tolerance", worst);
    (interior, border)
}

fn gradient_magnitude(d: &GaussianDerivatives) -> Plane {
    let data =
        d.dx.data
            .iter()
            .zip(&d.dy.data)
            .map(|(x, y)| (x * x + y * y).sqrt())
            .collect();
    Plane::from_vec(d.dx.width, d.dx.height, data)
}

fn laplacian(d: &GaussianDerivatives) -> Plane {
    let data = d
        .dxx
        .data
        .iter()
        .zip(&d.dyy.data)
        .map(|(x, y)| x + y)
        .collect();
    Plane::from_vec(d.dx.width, d.dx.height, data)
}

/// gaussian() and derivatives() vs scipy gaussian_filter (orders (0,0), (2,0), (0,2), (1,1)),
/// gaussian_gradient_magnitude and gaussian_laplace on the 72×96 image at σ = 1, 2, 4, 8.
#[test]
fn derivatives_match_scipy_on_main_image() {
    let fx = Fixture::load();
    let input = fx.get("main", "input", 0.0);
    let sigmas = fx.sigmas("main");
    assert_eq!(sigmas, vec![1.0, 2.0, 4.0, 8.0]);
    for sigma in sigmas {
        let d = derivatives(&input, sigma as f32);
        let want = |n: &str| fx.get("main", n, sigma);
        let (interior, _) = check(
            &d.smooth,
            &want("gaussian_filter"),
            sigma,
            "gaussian_filter",
        );
        assert!(
            interior > 0,
            "σ{sigma}: the image must have interior pixels"
        );
        check(
            &gaussian(&input, sigma as f32),
            &want("gaussian_filter"),
            sigma,
            "gaussian()",
        );
        check(
            &gradient_magnitude(&d),
            &want("gaussian_gradient_magnitude"),
            sigma,
            "gradmag",
        );
        check(
            &laplacian(&d),
            &want("gaussian_laplace"),
            sigma,
            "gaussian_laplace",
        );
        // numpy axis 0 is the row (y): order (2,0) = ∂²/∂y², (0,2) = ∂²/∂x², (1,1) = ∂²/∂x∂y.
        check(&d.dyy, &want("hrr"), sigma, "order (2,0)");
        check(&d.dxx, &want("hcc"), sigma, "order (0,2)");
        check(&d.dxy, &want("hrc"), sigma, "order (1,1)");
    }
}

/// A 6×5 image with kernel radii up to 16: every pixel is a border pixel and the reflection
/// wraps several periods, as scipy extends lines in mode 'reflect'.
#[test]
fn derivatives_match_scipy_on_tiny_image_with_multi_period_reflection() {
    let fx = Fixture::load();
    let input = fx.get("tiny", "input", 0.0);
    for sigma in fx.sigmas("tiny") {
        let d = derivatives(&input, sigma as f32);
        let want = |n: &str| fx.get("tiny", n, sigma);
        check(
            &d.smooth,
            &want("gaussian_filter"),
            sigma,
            "tiny gaussian_filter",
        );
        check(
            &gradient_magnitude(&d),
            &want("gaussian_gradient_magnitude"),
            sigma,
            "tiny gradmag",
        );
        check(
            &laplacian(&d),
            &want("gaussian_laplace"),
            sigma,
            "tiny laplace",
        );
        check(&d.dyy, &want("hrr"), sigma, "tiny order (2,0)");
        check(&d.dxx, &want("hcc"), sigma, "tiny order (0,2)");
        check(&d.dxy, &want("hrc"), sigma, "tiny order (1,1)");
    }
}

/// The whole bank on the L-only image vs the reference pipeline's filter_bank() recomputed
/// from the scipy fixtures: gauss, gradmag, LoG, then Hessian eigenvalues
/// mean ± sqrt(((hrr − hcc)/2)² + hrc²) (evaluated here in f64 from scipy's hrr, hcc, hrc).
#[test]
fn bank_matches_reference_features_from_scipy() {
    let fx = Fixture::load();
    let input = fx.get("main", "input", 0.0);
    let cfg = FilterBankConfig::default();
    let planes = filter_bank(std::slice::from_ref(&input), &cfg);
    let names = filter_bank_names(1, &cfg);
    assert_eq!(planes.len(), names.len());
    let mut i = 0;
    for &s in &cfg.scales {
        let sigma = f64::from(s);
        let want = |n: &str| fx.get("main", n, sigma);
        let (hrr, hcc, hrc) = (want("hrr"), want("hcc"), want("hrc"));
        let eig = |sign: f64| {
            let data = (0..hrr.len())
                .map(|p| {
                    let (rr, cc, rc) = (
                        f64::from(hrr.data[p]),
                        f64::from(hcc.data[p]),
                        f64::from(hrc.data[p]),
                    );
                    ((rr + cc) / 2.0 + sign * (((rr - cc) / 2.0).powi(2) + rc * rc).sqrt()) as f32
                })
                .collect();
            Plane::from_vec(hrr.width, hrr.height, data)
        };
        let expected = [
            want("gaussian_filter"),
            want("gaussian_gradient_magnitude"),
            want("gaussian_laplace"),
            eig(1.0),
            eig(-1.0),
        ];
        for e in expected {
            check(&planes[i], &e, sigma, &names[i]);
            i += 1;
        }
    }
}

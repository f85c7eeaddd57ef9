//! Tiled prediction is bit-identical to whole-image prediction (the requirement):
//! odd image sizes, tiles that do not divide them, tiles smaller than the halo and larger
//! than the image, grey and RGB models, 8- and 16-bit input. The reference is the same
//! model's whole-image prediction (`tile = 0`), which the other tests check against scipy and
//! scikit-learn stage by stage.

use grove::dataset::Dataset;
use grove::demo::{render_scene, write_demo_dataset};
use grove::features::stack::FeatureConfig;
use grove::forest::ForestConfig;
use grove::imageio::RasterImage;
use grove::plane::Plane;
use grove::segmenter::{Segmenter, TrainConfig};
use grove::tiling::predict_tiled;

fn small_config() -> TrainConfig {
    TrainConfig {
        features: FeatureConfig {
            // Position features in whole-image coordinates are part of what is checked.
            position: true,
            textons: 8,
            // Two windows: the halo must follow the wider one.
            texton_windows: vec![9, 15],
            kmeans_iterations: 10,
            ..FeatureConfig::default()
        },
        forest: ForestConfig {
            n_trees: 6,
            ..ForestConfig::default()
        },
        samples_per_image: 1500,
        ..TrainConfig::default()
    }
}

fn train(dir: &std::path::Path) -> Segmenter {
    let ds = Dataset::open(dir, Default::default()).unwrap();
    let entries: Vec<_> = ds.entries.iter().collect();
    small_config()
        .fit(&ds, &entries, Default::default())
        .unwrap()
}

fn rgb_model() -> Segmenter {
    let t = tempfile::tempdir().unwrap();
    write_demo_dataset(t.path(), 0..3, 96, 3).unwrap();
    train(t.path())
}

/// The demo scenes in 16-bit grey, with low bits that 8-bit input would not have.
fn grey_model() -> Segmenter {
    let t = tempfile::tempdir().unwrap();
    write_demo_dataset(t.path(), 0..3, 96, 3).unwrap();
    for i in 0..3u32 {
        let s = render_scene(3, i, 96, 96);
        let grey = grey16(&s.rgb);
        let name = format!("farm_{i:03}.png");
        image::ImageBuffer::<image::Luma<u16>, _>::from_raw(96, 96, grey)
            .unwrap()
            .save(t.path().join("images").join(&name))
            .unwrap();
    }
    let m = train(t.path());
    assert_eq!(m.features.channels, 1);
    m
}

fn grey16(rgb: &[u8]) -> Vec<u16> {
    rgb.chunks_exact(3)
        .enumerate()
        .map(|(i, p)| {
            let l = (p[0] as u32 * 77 + p[1] as u32 * 150 + p[2] as u32 * 29) as u16;
            l ^ (i as u16 & 0xff)
        })
        .collect()
}

fn raster(w: usize, h: usize, channels: Vec<Vec<f32>>) -> RasterImage {
    RasterImage {
        width: w,
        height: h,
        channels: channels
            .into_iter()
            .map(|d| Plane::from_vec(w, h, d))
            .collect(),
    }
}

fn rgb8(w: usize, h: usize, index: u32) -> RasterImage {
    let s = render_scene(11, index, w, h);
    let ch = (0..3)
        .map(|c| {
            s.rgb
                .iter()
                .skip(c)
                .step_by(3)
                .map(|&v| v as f32 / 255.0)
                .collect()
        })
        .collect();
    raster(w, h, ch)
}

fn rgb16(w: usize, h: usize, index: u32) -> RasterImage {
    let s = render_scene(11, index, w, h);
    let ch = (0..3)
        .map(|c| {
            s.rgb
                .iter()
                .skip(c)
                .step_by(3)
                .enumerate()
                .map(|(i, &v)| ((v as u16) << 8 | (i * 37 % 256) as u16) as f32 / 65535.0)
                .collect()
        })
        .collect();
    raster(w, h, ch)
}

fn grey(w: usize, h: usize, index: u32) -> RasterImage {
    let s = render_scene(11, index, w, h);
    let g = grey16(&s.rgb).iter().map(|&v| v as f32 / 65535.0).collect();
    raster(w, h, vec![g])
}

fn assert_bit_identical(model: &Segmenter, img: &RasterImage, tiles: &[usize], what: &str) {
    let whole = model.predict_proba(img);
    assert_eq!(
        whole.data.len(),
        img.width * img.height * model.classes.len()
    );
    for &t in tiles {
        let tiled = predict_tiled(model, img, t);
        assert_eq!((tiled.width, tiled.height), (img.width, img.height));
        let same = whole
            .data
            .iter()
            .zip(&tiled.data)
            .all(|(a, b)| a.to_bits() == b.to_bits());
        assert!(
            same,
            "{what} {}x{}: tile {t} differs from the whole image",
            img.width, img.height
        );
    }
}

#[test]
fn tiled_rgb_model_is_bit_identical() {
    let model = rgb_model();
    let halo = model.features.halo();
    assert_eq!(halo, 32 + 7, "σ = 8 → radius 32; widest window 15 → 7");
    // Tiles smaller than the halo, not dividing the size, and larger than the image.
    assert_bit_identical(&model, &rgb8(157, 119, 20), &[16, 37, 64, 200], "RGB 8-bit");
    assert_bit_identical(&model, &rgb16(131, 101, 21), &[29, 100], "RGB 16-bit");
    // Grey input to a colour model (a = b = 0), and an image thinner than the halo.
    assert_bit_identical(&model, &grey(123, 77, 22), &[40], "grey into RGB model");
    assert_bit_identical(&model, &rgb8(23, 140, 23), &[16, 50], "narrow RGB");
}

#[test]
fn tiled_grey_model_is_bit_identical() {
    let model = grey_model();
    assert_bit_identical(&model, &grey(141, 99, 30), &[16, 45, 99], "grey 16-bit");
    assert_bit_identical(&model, &rgb8(97, 113, 31), &[33], "RGB into grey model");
}

/// Smoothing tile by tile with a halo (`smooth::tiles`, what `apply --tile N` does) against
/// whole-image smoothing: the share of labels that differ (issue #7 asks for < 0.1 %). An
/// approximation by design (the CRF couples all pixels), so this measures it on a demo scene
/// and a larger one over several tile sizes, and bounds it. The README's table measures the
/// same with the demo's default model (`examples/tile_smoothing.rs`).
#[test]
fn tiled_smoothing_rarely_differs_from_whole_image_smoothing() {
    use grove::smooth::tiles::{smooth_labels_tiled, SMOOTH_HALO};
    use grove::smooth::{smooth, SmoothMethod, SmoothSettings};
    let model = rgb_model();
    for (img, tiles) in [
        (rgb8(300, 260, 11), &[64, 100][..]),
        (rgb8(640, 512, 12), &[64, 128, 256][..]),
    ] {
        let probs = predict_tiled(&model, &img, 0);
        let lab = model.features.lab(&img);
        for method in [SmoothMethod::Expansion, SmoothMethod::MeanField] {
            let s = SmoothSettings {
                method,
                ..SmoothSettings::default()
            };
            let whole = smooth(&probs, &lab, &s, None).labels;
            assert_eq!(whole, smooth_labels_tiled(&probs, &lab, &s, 0, SMOOTH_HALO));
            for &tile in tiles {
                let tiled = smooth_labels_tiled(&probs, &lab, &s, tile, SMOOTH_HALO);
                let differ = whole.iter().zip(&tiled).filter(|(a, b)| a != b).count();
                let share = differ as f64 / whole.len() as f64;
                eprintln!(
                    "{method:?} {}x{} tile {tile} halo {SMOOTH_HALO}: {differ} of {} labels differ ({:.4} %)",
                    img.width,
                    img.height,
                    whole.len(),
                    100.0 * share
                );
                assert!(
                    share < 0.001,
                    "{method:?} tile {tile}: {:.4} % differ",
                    100.0 * share
                );
            }
            // Without a halo the seams show: the halo is what makes the difference.
            let bare = smooth_labels_tiled(&probs, &lab, &s, 64, 0);
            let seams = whole.iter().zip(&bare).filter(|(a, b)| a != b).count();
            eprintln!("{method:?} tile 64 without halo: {seams} labels differ");
        }
    }
}

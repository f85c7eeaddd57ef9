//! Measures how often smoothing tile by tile (`--tile N`, halo `SMOOTH_HALO`) gives another
//! label than smoothing the whole image at once (`--tile 0`), per solver and tile size, over
//! the given images (the README's "Tiles" table). The forest's probabilities are the same
//! for every tile size (bit for bit, `tests/tiling.rs`), so only the smoothing differs.
//!
//! `cargo run --release --example tile_smoothing -- MODEL TILES IMAGE...`
//! (TILES comma-separated, e.g. 128,256,512)

use std::path::PathBuf;
use std::time::Instant;

use grove::prediction::ImageContrast;
use grove::smooth::SmoothMethod;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 3 {
        eprintln!("usage: tile_smoothing MODEL TILES IMAGE...");
        std::process::exit(2);
    }
    let model = grove::model::load(&PathBuf::from(&args[0])).unwrap_or_else(|e| fail(e));
    let tiles: Vec<usize> = args[1]
        .split(',')
        .map(|t| {
            t.trim()
                .parse()
                .unwrap_or_else(|_| fail(format!("tile {t:?}")))
        })
        .collect();
    let strength = model.smoothing.settings().strength;
    let methods = [SmoothMethod::Expansion, SmoothMethod::MeanField];
    // Per method and tile: labels that differ; pixels in all; seconds whole and tiled.
    let mut differ = vec![vec![0u64; tiles.len()]; methods.len()];
    let mut seconds = vec![vec![0f64; tiles.len() + 1]; methods.len()];
    let mut pixels = 0u64;
    for path in &args[2..] {
        let image = grove::imageio::read_image(&PathBuf::from(path)).unwrap_or_else(|e| fail(e));
        let probs = grove::tiling::predict_tiled(&model, &image, 512);
        let contrast = ImageContrast::new(&model, &image);
        pixels += (image.width * image.height) as u64;
        for (m, &method) in methods.iter().enumerate() {
            let s = grove::smooth::SmoothSettings {
                method,
                strength,
                ..Default::default()
            };
            let t0 = Instant::now();
            let whole = contrast.smooth(probs.clone(), &s, 0).labels;
            seconds[m][0] += t0.elapsed().as_secs_f64();
            for (i, &tile) in tiles.iter().enumerate() {
                let t0 = Instant::now();
                let tiled = contrast.smooth(probs.clone(), &s, tile).labels;
                seconds[m][i + 1] += t0.elapsed().as_secs_f64();
                differ[m][i] += whole.iter().zip(&tiled).filter(|(a, b)| a != b).count() as u64;
            }
        }
    }
    println!(
        "{} images, {:.2} Mpx, strength {strength}",
        args.len() - 2,
        pixels as f64 / 1e6
    );
    println!("method     tile  differing labels  share      smoothing s (whole → tiled)");
    for (m, method) in methods.iter().enumerate() {
        for (i, tile) in tiles.iter().enumerate() {
            println!(
                "{:<10} {:>5}  {:>16}  {:>8.4} %  {:.2} → {:.2}",
                method.name(),
                tile,
                differ[m][i],
                100.0 * differ[m][i] as f64 / pixels as f64,
                seconds[m][0],
                seconds[m][i + 1]
            );
        }
    }
}

fn fail(e: impl std::fmt::Display) -> ! {
    eprintln!("tile_smoothing: {e}");
    std::process::exit(1)
}

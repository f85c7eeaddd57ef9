//! Writes a large synthetic RGB PNG for the memory and scaling measurements
//! (`scripts/memory.sh`): a mosaic of the demo's farm scenes (`grove::demo::render_scene`),
//! rendered one row of scenes at a time and written row by row, so an image of hundreds of
//! megapixels never exists whole (the process holds one row of scenes).
//!
//! `cargo run --release --example big_scene -- OUT.png WIDTH HEIGHT [SCENE_PX] [SEED]`

use std::path::PathBuf;

use grove::demo::render_scene;
use grove::imageio::stream_out::PngRowWriter;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.len() < 3 {
        eprintln!("usage: big_scene OUT.png WIDTH HEIGHT [SCENE_PX (512)] [SEED (7)]");
        std::process::exit(2);
    }
    let number = |i: usize, default: usize| -> usize {
        args.get(i).map_or(default, |v| {
            v.parse().unwrap_or_else(|_| {
                eprintln!("big_scene: {v:?} is not a whole number");
                std::process::exit(2)
            })
        })
    };
    let out = PathBuf::from(&args[0]);
    let (width, height) = (number(1, 0), number(2, 0));
    let scene = number(3, 512).max(16);
    let seed = number(4, 7) as u64;
    if width == 0 || height == 0 {
        eprintln!("big_scene: WIDTH and HEIGHT must be at least 1");
        std::process::exit(2);
    }
    if let Err(e) = write(&out, width, height, scene, seed) {
        eprintln!("big_scene: {e}");
        std::process::exit(1);
    }
}

fn write(
    out: &std::path::Path,
    width: usize,
    height: usize,
    scene: usize,
    seed: u64,
) -> grove::Result<()> {
    let mut png = PngRowWriter::create(out, width, height, png::ColorType::Rgb, None)?;
    let across = width.div_ceil(scene);
    for (row, y0) in (0..height).step_by(scene).enumerate() {
        let rows = scene.min(height - y0);
        // Each scene of the row is rendered whole at `scene` pixels and cropped.
        let tiles: Vec<Vec<u8>> = (0..across)
            .map(|col| render_scene(seed, (row * across + col) as u32, scene, scene).rgb)
            .collect();
        let mut band = Vec::with_capacity(rows * width * 3);
        for y in 0..rows {
            for (col, t) in tiles.iter().enumerate() {
                let w = scene.min(width - col * scene);
                band.extend_from_slice(&t[y * scene * 3..(y * scene + w) * 3]);
            }
        }
        png.write_rows(&band)?;
    }
    png.finish()
}

//! `grove apply`.

use std::path::{Path, PathBuf};
use std::time::Instant;

use clap::Args;

use crate::dataset::{list_images, stem_of};
use crate::error::{GroveError, Result};
use crate::eval::areas::{count_classes, AreaTable, PixelSize, RoiMasks};
use crate::imageio::{has_image_extension, read_image, RasterImage};
use crate::outputs::{write_outputs, OutputOptions, OutputPaths};
use crate::progress::Progress;
use crate::segmenter::Probabilities;

#[derive(Args, Debug)]
pub struct ApplyArgs {
    /// Model file written by `grove train`.
    pub model: PathBuf,
    /// Images, or folders of images (a dataset folder's images/ is used if present).
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,
    /// Output folder (labels/, overlays/, confidence/, probabilities/ are created inside, and
    /// areas.csv, areas.json and classes.toml).
    #[arg(long, short, value_name = "DIR")]
    pub out: PathBuf,
    /// Also write the confidence map (winning class probability, 0–255): dark = unsure.
    #[arg(long)]
    pub confidence: bool,
    /// Also write one probability map per class.
    #[arg(long)]
    pub probabilities: bool,
    /// Skip the colour overlays.
    #[arg(long)]
    pub no_overlay: bool,
    /// Class colour weight in overlays, 0–1.
    #[arg(long, default_value_t = 0.45, value_name = "W")]
    pub opacity: f32,
    /// Side of one pixel with its unit (e.g. 0.05m, 2.5um): areas.csv/json then give areas
    /// in the unit squared as well as pixel counts.
    #[arg(long, value_name = "SIZE")]
    pub pixel_size: Option<PixelSize>,
    /// Folder of region-of-interest masks (same stems as the images; white = counted): area
    /// figures count only inside them, and fractions are of the ROI.
    #[arg(long, value_name = "DIR")]
    pub roi: Option<PathBuf>,
    /// Replace existing files in --out even if grove did not write them (grove's own
    /// earlier outputs are always replaced; inputs never are).
    #[arg(long)]
    pub force: bool,
    /// Predict in tiles of N × N pixels (plus a halo), bounding memory by the tile size;
    /// 0 = the whole image at once. The result does not depend on it.
    #[arg(long, value_name = "N", default_value_t = crate::tiling::DEFAULT_TILE)]
    pub tile: usize,
}

/// Expands files and folders into image paths, keeping the given order.
pub fn collect_inputs(inputs: &[PathBuf]) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for p in inputs {
        if p.is_dir() {
            let sub = p.join("images");
            let dir: &Path = if sub.is_dir() { &sub } else { p };
            let found = list_images(dir)?;
            if found.is_empty() {
                return Err(GroveError::input(
                    dir,
                    "no images (PNG, JPEG or TIFF) in this folder",
                ));
            }
            out.extend(found);
        } else if p.is_file() {
            if !has_image_extension(p) {
                return Err(GroveError::input(p, "not a PNG, JPEG or TIFF file"));
            }
            crate::dataset::check_utf8_name(p)?;
            out.push(p.clone());
        } else {
            return Err(GroveError::input(p, "no such file or folder"));
        }
    }
    let mut stems: Vec<(String, &PathBuf)> = out.iter().map(|p| (stem_of(p), p)).collect();
    stems.sort();
    for w in stems.windows(2) {
        if w[0].0 == w[1].0 {
            return Err(GroveError::input(
                w[1].1,
                format!(
                    "same name as {}; outputs would overwrite each other",
                    w[0].1.display()
                ),
            ));
        }
    }
    Ok(out)
}

/// Every output path, checked before any image is read: none is an input, none replaces a
/// file grove did not write (without --force), and no two images write the same file.
fn check_outputs(
    args: &ApplyArgs,
    images: &[PathBuf],
    classes: &crate::dataset::ClassTable,
    opts: &OutputOptions,
) -> Result<()> {
    let inputs = images
        .iter()
        .chain(&args.inputs)
        .map(PathBuf::as_path)
        .chain(std::iter::once(args.model.as_path()));
    let guard = crate::output_guard::OutputGuard::new(inputs, args.force);
    guard.check_dir(&args.out)?;
    guard.check_file(&args.out.join("classes.toml"))?;
    let mut seen = std::collections::HashMap::new();
    for image in images {
        let paths = OutputPaths::new(&args.out, &stem_of(image), classes, opts);
        for p in paths.all() {
            if let Some(prev) = seen.insert(p.to_path_buf(), image) {
                return Err(GroveError::input(
                    image,
                    format!(
                        "its output {} would overwrite that of {}; rename one of them",
                        p.display(),
                        prev.display()
                    ),
                ));
            }
            guard.check_file(p)?;
        }
    }
    Ok(())
}

pub fn run(args: ApplyArgs, progress: Progress) -> Result<()> {
    if !(0.0..=1.0).contains(&args.opacity) {
        return Err(GroveError::Config(format!(
            "--opacity {} must be between 0 and 1",
            args.opacity
        )));
    }
    crate::tiling::check_tile(args.tile)?;
    let model = crate::model::load(&args.model)?;
    let images = collect_inputs(&args.inputs)?;
    let roi = args.roi.as_deref().map(RoiMasks::open).transpose()?;
    if let Some(r) = &roi {
        let stems: Vec<String> = images.iter().map(|p| stem_of(p)).collect();
        r.check_covers(stems.iter().map(String::as_str))?;
    }
    let mut areas = AreaTable::new(model.classes.names(), args.pixel_size.clone());
    let opts = OutputOptions {
        overlay: !args.no_overlay,
        confidence: args.confidence,
        probabilities: args.probabilities,
        overlay_opacity: args.opacity,
    };
    check_outputs(&args, &images, &model.classes, &opts)?;
    let t0 = Instant::now();
    let bar = progress.stage("applying", images.len() as u64);
    let mut pixels = 0usize;
    let mut warned = false;
    // Encoding the PNGs of one image overlaps the decoding and prediction of the next: PNG
    // coding is single-threaded, prediction uses every core.
    std::thread::scope(|scope| -> Result<()> {
        let (tx, rx) = std::sync::mpsc::sync_channel::<(String, RasterImage, Probabilities)>(1);
        let writer = scope.spawn(|| -> Result<()> {
            for (stem, img, probs) in rx {
                let index = write_outputs(&args.out, &stem, &img, &probs, &model.classes, &opts)?;
                let mask = match &roi {
                    Some(r) => Some(r.mask(&stem, img.width, img.height)?),
                    None => None,
                };
                let counts = count_classes(&index, model.classes.len(), mask.as_deref());
                areas.add_counts(&stem, &counts);
                bar.inc(1);
            }
            Ok(())
        });
        let mut predicted = Ok(());
        for path in &images {
            let img = match read_image(path) {
                Ok(img) => img,
                Err(e) => {
                    predicted = Err(e);
                    break;
                }
            };
            if !warned && img.is_grey() != (model.features.channels == 1) {
                warned = true;
                let (model_kind, image_kind) = if img.is_grey() {
                    ("colour", "grey")
                } else {
                    ("grey", "colour")
                };
                bar.suspend(|| {
                    eprintln!(
                        "warning: {}: {image_kind} image, but the model was trained on {model_kind} images; results may be poor (train on images like the ones you apply to)",
                        path.display()
                    )
                });
            }
            let probs = crate::tiling::predict_tiled(&model, &img, args.tile);
            pixels += img.width * img.height;
            if tx.send((stem_of(path), img, probs)).is_err() {
                break; // the writer stopped on an error, which join reports
            }
        }
        drop(tx);
        let written = writer.join().expect("the output writer does not panic");
        predicted.and(written)
    })?;
    bar.finish_and_clear();
    areas.write(&args.out)?;
    // The class table beside the label maps makes the output folder readable on its own
    // (`grove areas` needs the names of the ids).
    crate::imageio::write_atomic(
        &args.out.join("classes.toml"),
        model.classes.to_toml().as_bytes(),
    )?;
    let secs = t0.elapsed().as_secs_f64();
    println!(
        "segmented {} image{} ({:.2} Mpx) in {secs:.1} s; label maps in {}",
        images.len(),
        if images.len() == 1 { "" } else { "s" },
        pixels as f64 / 1e6,
        args.out.join("labels").display()
    );
    Ok(())
}

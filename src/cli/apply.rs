//! `grove apply`.

use std::io::Write;
use std::path::PathBuf;

use clap::Args;
use serde::Serialize;

use crate::batch::{list_inputs, BatchEvent, BatchJob, ImageRecord, Shard};
use crate::cli::SmoothArgs;
use crate::dataset::stem_of;
use crate::error::{GroveError, Result};
use crate::eval::areas::{AreaTable, PixelSize, RoiMasks};
use crate::outputs::MapFormat;
use crate::outputs::{OutputOptions, OutputPaths, ProbabilityFormat};
use crate::progress::Progress;

#[derive(Args, Debug)]
pub struct ApplyArgs {
    /// Model file written by `grove train`.
    pub model: PathBuf,
    /// Images, folders of images (a dataset folder's images/ is used if present), quoted
    /// glob patterns ('flights/**/*.tif', expanded by grove) or @LIST files (one input per
    /// line, relative to the list file's folder; # starts a comment).
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<PathBuf>,
    /// Output folder (labels/, overlays/, confidence/, probabilities/, done/ are created
    /// inside, and areas.csv, areas.json and classes.toml).
    #[arg(long, short, value_name = "DIR")]
    pub out: PathBuf,
    /// Also write the confidence map (winning class probability, 0–255): dark = unsure.
    #[arg(long)]
    pub confidence: bool,
    /// Also write uncertainty maps: uncertainty/margin/ (gap between the two most probable
    /// classes × 255: dark = unsure) and uncertainty/entropy/ (normalised entropy × 255:
    /// bright = unsure).
    #[arg(long)]
    pub uncertainty: bool,
    /// Also write the class probabilities: `maps` (the default when no value is given) = one
    /// 8-bit map per class in the --map-format; `npy` = one float32 array per image
    /// (height × width × classes, for numpy.load). Put it after the inputs, or write
    /// --probabilities=npy: just before an input it takes that for a format.
    #[arg(
        long,
        value_name = "FORMAT",
        num_args = 0..=1,
        default_missing_value = "maps"
    )]
    pub probabilities: Option<ProbabilityFormat>,
    /// File format of the maps (labels, overlays, confidence, uncertainty, probability maps):
    /// png, or tiff = tiled, Deflate-compressed TIFF (BigTIFF when it could pass 4 GiB) that
    /// keeps a TIFF input's resolution and GeoTIFF tags.
    #[arg(long, value_name = "FORMAT", default_value = "png")]
    pub map_format: MapFormat,
    /// With --map-format tiff: write BigTIFF even when a map would fit a standard TIFF.
    #[arg(long)]
    pub bigtiff: bool,
    /// Skip the colour overlays.
    #[arg(long)]
    pub no_overlay: bool,
    /// Class colour weight in overlays, 0–1.
    #[arg(long, default_value_t = 0.45, value_name = "W")]
    pub opacity: f32,
    /// Leave this class untinted in overlays, so the image shows as it is there (e.g. a
    /// black background); by class name, repeatable.
    #[arg(long = "no-tint", value_name = "CLASS")]
    pub no_tint: Vec<String>,
    /// Side of one pixel with its unit (e.g. 0.05m, 2.5um): areas.csv/json then give areas
    /// in the unit squared as well as pixel counts.
    #[arg(long, value_name = "SIZE")]
    pub pixel_size: Option<PixelSize>,
    /// Folder of region-of-interest masks (same stems as the images; white = counted): area
    /// figures count only inside them, and fractions are of the ROI.
    #[arg(long, value_name = "DIR")]
    pub roi: Option<PathBuf>,
    /// Process only shard K of N (0 <= K < N): the images whose name hashes to K. Run N
    /// processes with K = 0..N-1 (a job array) to cover every image exactly once.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<Shard>,
    /// Redo every image, even those whose outputs are complete and made by this model, and
    /// replace existing files in --out even if grove did not write them (inputs never are).
    #[arg(long)]
    pub force: bool,
    /// Predict and smooth in tiles of N × N pixels (plus a halo; tiles are shorter on images
    /// wider than 8192 pixels, so a row of tiles holds at most 8 Mi pixels), bounding memory
    /// by the tile size; 0 = the whole image at once. The forest's result does not depend on
    /// it; smoothing in tiles changes a few labels in 100 000 (README). With N > 0, PNG and
    /// TIFF images above 8 megapixels are also streamed: read, predicted, smoothed and
    /// written band by band, never held whole, so they are not limited by memory.
    #[arg(long, value_name = "N", default_value_t = crate::tiling::DEFAULT_TILE)]
    pub tile: usize,
    /// Print one JSON line per image on stdout (status done/skipped, image, outputs, pixels,
    /// seconds spent in this run, shard, streamed); the summary goes to stderr.
    #[arg(long)]
    pub log_json: bool,
    #[command(flatten)]
    pub smoothing: SmoothArgs,
}

/// One `--log-json` line.
#[derive(Serialize)]
struct LogLine<'a> {
    /// "done" (made now) or "skipped" (complete from an earlier run with this model).
    status: &'a str,
    image: &'a str,
    outputs: &'a [String],
    pixels: u64,
    seconds: f64,
    shard: Option<&'a str>,
    /// Read and written band by band rather than whole (large PNG and TIFF images).
    streamed: bool,
}

/// `shard` is this run's (a skipped image may have been made under another split), and a
/// skipped image took no time in this run.
fn log_json(status: &str, rec: &ImageRecord, shard: Option<Shard>) {
    let shard = shard.map(|s| s.to_string());
    let line = LogLine {
        status,
        image: &rec.image,
        outputs: &rec.outputs,
        pixels: rec.pixels,
        seconds: if status == "done" { rec.seconds } else { 0.0 },
        shard: shard.as_deref(),
        streamed: rec.streamed,
    };
    let mut out = std::io::stdout().lock();
    // A closed pipe ends the process (SIGPIPE); other write errors are not worth a failure.
    let _ = serde_json::to_writer(&mut out, &line);
    let _ = writeln!(out);
    let _ = out.flush();
}

/// Every output path of this run, checked before any image is read: none is an input, none
/// replaces a file grove did not write (without --force), and no two images write the same
/// file.
fn check_outputs(
    args: &ApplyArgs,
    images: &[PathBuf],
    classes: &crate::dataset::ClassTable,
    opts: &OutputOptions,
    records: &crate::batch::Records,
) -> Result<()> {
    let inputs = images
        .iter()
        .chain(&args.inputs)
        .map(PathBuf::as_path)
        .chain(std::iter::once(args.model.as_path()));
    let guard = crate::output_guard::OutputGuard::new(inputs.clone(), args.force);
    // For files a record of grove's lists: only the rules that hold even with --force.
    let recorded_guard = crate::output_guard::OutputGuard::new(inputs, true);
    guard.check_dir(&args.out)?;
    for own in ["classes.toml", "areas.csv", "areas.json"] {
        guard.check_file(&args.out.join(own))?;
    }
    let mut seen = std::collections::HashMap::new();
    for image in images {
        let stem = stem_of(image);
        let paths = OutputPaths::new(&args.out, &stem, classes, opts);
        let record = records.path(&stem);
        let recorded = records.recorded_outputs(&stem);
        for p in paths.all().into_iter().chain([record.as_path()]) {
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
            if recorded.iter().any(|r| r == p) {
                recorded_guard.check_file(p)?;
            } else {
                guard.check_file(p)?;
            }
        }
    }
    Ok(())
}

/// Class indices named by `--no-tint`; an unknown name is a usage error that lists the
/// model's classes.
fn untinted_classes(
    names: &[String],
    classes: &crate::dataset::ClassTable,
    model: &std::path::Path,
) -> Result<Vec<u8>> {
    let mut found: Vec<u8> = Vec::new();
    for name in names {
        match classes.classes().iter().position(|c| &c.name == name) {
            Some(i) => found.push(i as u8),
            None => {
                return Err(GroveError::Config(format!(
                    "--no-tint {name:?}: model {} has no such class (its classes: {})",
                    model.display(),
                    classes.names().join(", ")
                )))
            }
        }
    }
    found.sort_unstable();
    found.dedup();
    Ok(found)
}

pub fn run(args: ApplyArgs, progress: Progress) -> Result<()> {
    if !(0.0..=1.0).contains(&args.opacity) {
        return Err(GroveError::Config(format!(
            "--opacity {} must be between 0 and 1",
            args.opacity
        )));
    }
    crate::tiling::check_tile(args.tile)?;
    if args.bigtiff && args.map_format != MapFormat::Tiff {
        return Err(GroveError::Config(
            "--bigtiff applies to TIFF maps; add --map-format tiff".into(),
        ));
    }
    let (model, model_sha256) = crate::model::load_with_sha256(&args.model)?;
    let smoothing = args.smoothing.settings(&model.smoothing)?;
    let all = list_inputs(&args.inputs)?;
    let n_all = all.len();
    let images = match args.shard {
        Some(s) => s.select(all),
        None => all,
    };
    let untinted = untinted_classes(&args.no_tint, &model.classes, &args.model)?;
    let roi = args.roi.as_deref().map(RoiMasks::open).transpose()?;
    if let Some(r) = &roi {
        let stems: Vec<String> = images.iter().map(|p| stem_of(p)).collect();
        r.check_covers(stems.iter().map(String::as_str))?;
    }
    let mut areas = AreaTable::new(model.classes.names(), args.pixel_size.clone());
    let job = BatchJob {
        model: &model,
        model_sha256,
        images,
        out_dir: args.out.clone(),
        options: OutputOptions {
            overlay: !args.no_overlay,
            confidence: args.confidence,
            probabilities: args.probabilities.is_some(),
            uncertainty: args.uncertainty,
            overlay_opacity: args.opacity,
            untinted,
            probability_format: args.probabilities.unwrap_or_default(),
            map_format: args.map_format,
            bigtiff: args.bigtiff,
        },
        shard: args.shard,
        force: args.force,
        roi: roi.as_ref(),
        tile: args.tile,
        smoothing,
    };
    check_outputs(
        &args,
        &job.images,
        &model.classes,
        &job.options,
        &job.records(),
    )?;
    if let Some(s) = args.shard {
        eprintln!("shard {s}: {} of {n_all} images", job.images.len());
    }
    let bar = progress.images("applying", job.images.len() as u64);
    let t0 = std::time::Instant::now();
    let mut pixels = 0u64;
    let summary = job.run(&mut areas, |event| match event {
        BatchEvent::Skipping(recs) => {
            bar.set_length((job.images.len() - recs.len()) as u64);
            bar.suspend(|| {
                eprintln!(
                    "skipping {} image{} whose outputs in {} are complete and made by this model (--force redoes them)",
                    recs.len(),
                    if recs.len() == 1 { "" } else { "s" },
                    args.out.display()
                )
            });
            if args.log_json {
                recs.iter().for_each(|r| log_json("skipped", r, args.shard));
            }
        }
        BatchEvent::Done(rec) => {
            pixels += rec.pixels;
            let rate = pixels as f64 / 1e6 / t0.elapsed().as_secs_f64().max(1e-9);
            bar.set_message(format!("{rate:.2} MP/s"));
            bar.inc(1);
            if args.log_json {
                bar.suspend(|| log_json("done", rec, args.shard));
            }
        }
        BatchEvent::Warning(w) => bar.suspend(|| eprintln!("warning: {w}")),
        BatchEvent::Rows {
            image,
            rows,
            height,
        } => {
            // A streamed image can take minutes: say how far into it the run is.
            let name = image.file_name().unwrap_or_default().to_string_lossy();
            bar.set_message(format!("{name} {} %", rows * 100 / height.max(1)));
        }
    })?;
    bar.finish_and_clear();
    areas.write(&args.out)?;
    // The class table beside the label maps makes the output folder readable on its own
    // (`grove areas` needs the names of the ids).
    crate::imageio::write_atomic(
        &args.out.join("classes.toml"),
        model.classes.to_toml().as_bytes(),
    )?;
    let text = if summary.done == 0 {
        format!(
            "nothing to do: all {} images already done in {} (--force redoes them)",
            summary.skipped,
            args.out.display()
        )
    } else {
        format!(
            "segmented {} image{} ({:.2} Mpx, {:.2} Mpx/s, smoothing {}) in {:.1} s{}; label maps in {}",
            summary.done,
            if summary.done == 1 { "" } else { "s" },
            summary.pixels as f64 / 1e6,
            summary.pixels as f64 / 1e6 / summary.seconds.max(1e-9),
            crate::prediction::describe(&job.smoothing),
            summary.seconds,
            match summary.skipped {
                0 => String::new(),
                n => format!(", {n} already done"),
            },
            args.out.join("labels").display()
        )
    };
    if args.log_json {
        eprintln!("{text}");
    } else {
        println!("{text}");
    }
    Ok(())
}

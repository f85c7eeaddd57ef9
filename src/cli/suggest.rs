//! `grove suggest`.

use std::path::PathBuf;

use clap::Args;

use crate::batch::inputs::list_inputs;
use crate::cli::LabelArgs;
use crate::dataset::stem_of;
use crate::error::{GroveError, Result};
use crate::eval::suggest::{draw_regions, rank, SuggestConfig, SuggestReport};
use crate::eval::suggest_files::{label_file_of, suggest_file};
use crate::imageio::{output_path, write_atomic, write_rgb_png};
use crate::outputs::OutputOptions;
use crate::progress::Progress;

#[derive(Args, Debug)]
pub struct SuggestArgs {
    /// Model file written by `grove train`.
    pub model: PathBuf,
    /// Images, or folders of images. For a dataset folder its labels/ are read, and pixels
    /// already labelled there are never suggested.
    #[arg(required = true)]
    pub inputs: Vec<PathBuf>,
    /// How many images to report and draw (the best first).
    #[arg(long, default_value_t = 5, value_name = "N")]
    pub top: usize,
    /// Output folder for the pictures (DIR/NAME.png: prediction colours, unsure regions
    /// brightened and outlined, numbered by rank).
    #[arg(long, short, value_name = "DIR")]
    pub out: PathBuf,
    /// Also write the ranking as JSON: {"images": [{"image", "score", "regions": [{"x", "y",
    /// "width", "height", "pixels", "classes"}]}]}, best first.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Label files of the images (same stems) when they are not in a dataset folder.
    #[arg(long, value_name = "DIR")]
    pub labels: Option<PathBuf>,
    /// Regions per image.
    #[arg(long, default_value_t = 5, value_name = "N")]
    pub regions: usize,
    /// Unsureness (1 − margin between the two most probable classes, smoothed) above which a
    /// pixel belongs to a region, 0–1.
    #[arg(long, default_value_t = 0.5, value_name = "U")]
    pub threshold: f32,
    #[command(flatten)]
    pub label_args: LabelArgs,
    /// Replace existing files in the output places that grove did not write.
    #[arg(long)]
    pub force: bool,
}

/// Every output place, checked before any image is read (see `output_guard`): a picture may
/// be written for any of the images.
fn check_outputs(args: &SuggestArgs, images: &[PathBuf]) -> Result<()> {
    let label_files: Vec<PathBuf> = images
        .iter()
        .filter_map(|i| label_file_of(i, args.labels.as_deref()))
        .collect();
    let inputs = images
        .iter()
        .chain(&label_files)
        .chain(&args.inputs)
        .map(PathBuf::as_path)
        .chain([args.model.as_path()]);
    let guard = crate::output_guard::OutputGuard::new(inputs, args.force);
    guard.check_dir(&args.out)?;
    for image in images {
        guard.check_file(&output_path(&args.out, &stem_of(image), "png"))?;
    }
    if let Some(json) = &args.json {
        guard.check_file(json)?;
    }
    Ok(())
}

pub fn run(args: SuggestArgs, progress: Progress) -> Result<()> {
    if args.top == 0 {
        return Err(GroveError::Config("--top must be at least 1".into()));
    }
    let cfg = SuggestConfig {
        threshold: args.threshold,
        max_regions: args.regions,
        ..SuggestConfig::default()
    };
    cfg.validate()?;
    if let Some(dir) = &args.labels {
        if !dir.is_dir() {
            return Err(GroveError::input(dir, "label folder not found"));
        }
    }
    let model = crate::model::load(&args.model)?;
    let images = list_inputs(&args.inputs)?;
    check_outputs(&args, &images)?;
    let opts = args.label_args.options();
    let bar = progress.stage("suggesting", images.len() as u64);
    let mut found = Vec::with_capacity(images.len());
    let mut labelled_images = 0;
    for path in &images {
        let f = suggest_file(&model, path, args.labels.as_deref(), &opts, &cfg)?;
        labelled_images += f.labelled as usize;
        found.push((f.suggestion, path.clone(), f.image, f.probabilities));
        bar.inc(1);
    }
    bar.finish_and_clear();
    let mut ranked: Vec<_> = found.iter().map(|f| f.0.clone()).collect();
    rank(&mut ranked);
    ranked.truncate(args.top);
    for s in &ranked {
        let (_, _, img, probs) = found
            .iter()
            .find(|f| f.0.image == s.image)
            .expect("ranked images come from found");
        let mut rgb = crate::outputs::overlay(
            img,
            &probs.argmax(),
            &model.classes,
            &OutputOptions::default().tint(model.classes.len()),
        );
        draw_regions(&mut rgb, img.width, img.height, &s.regions);
        write_rgb_png(
            &output_path(&args.out, &s.image, "png"),
            img.width,
            img.height,
            &rgb,
        )?;
    }
    print!("{}", table(&ranked));
    println!(
        "{} of {} images ranked ({} with labels, whose labelled pixels are not suggested); pictures in {}",
        ranked.len(),
        images.len(),
        labelled_images,
        args.out.display()
    );
    if let Some(path) = &args.json {
        let json = serde_json::to_string_pretty(&SuggestReport {
            generator: crate::output_guard::generator(),
            images: ranked,
        })
        .expect("suggestions serialise")
            + "\n";
        write_atomic(path, json.as_bytes())?;
        println!("ranking written to {}", path.display());
    }
    Ok(())
}

fn table(ranked: &[crate::eval::suggest::ImageSuggestion]) -> String {
    let width = ranked
        .iter()
        .map(|s| s.image.len())
        .max()
        .unwrap_or(5)
        .max(5);
    let mut s = format!(
        "{:>4}  {:<width$}  {:>10}  unsure regions (box x,y widthxheight: pixels, classes in doubt)\n",
        "rank", "image", "score"
    );
    for (i, im) in ranked.iter().enumerate() {
        s += &format!("{:>4}  {:<width$}  {:>10.0}", i + 1, im.image, im.score);
        if im.regions.is_empty() {
            s += "  none above the threshold\n";
        }
        for (j, r) in im.regions.iter().enumerate() {
            if j > 0 {
                s += &format!("{:>4}  {:<width$}  {:>10}", "", "", "");
            }
            s += &format!(
                "  {}. {},{} {}x{}: {} px, {}\n",
                j + 1,
                r.x,
                r.y,
                r.width,
                r.height,
                r.pixels,
                r.classes.join(" / ")
            );
        }
    }
    s + "score = pixels' worth of doubt not yet labelled (sum of 1 - margin)\n"
}

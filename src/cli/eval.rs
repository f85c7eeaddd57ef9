//! `grove eval`.

use std::path::PathBuf;

use clap::Args;

use crate::cli::SmoothArgs;
use crate::cli::{open_dataset, LabelArgs};
use crate::error::{GroveError, Result};
use crate::eval::score::{evaluate_smoothed, MetricsReport};
use crate::progress::Progress;
use crate::report::{Report, Thumbnails};
use crate::smooth::{SmoothMethod, SmoothSettings};

#[derive(Args, Debug)]
pub struct EvalArgs {
    /// Model file written by `grove train`.
    pub model: PathBuf,
    /// Labelled dataset folder to score on (images the model was not trained on).
    pub data: PathBuf,
    /// Also write the scores as JSON.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Also write a self-contained HTML report (scores, confusion heat map, per-image
    /// pictures); it needs no network and no other file.
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
    /// Replace an existing file at --json or --report even if grove did not write it.
    #[arg(long)]
    pub force: bool,
    /// Predict in tiles of N × N pixels (plus a halo), bounding memory; 0 = whole images at
    /// once. Scores do not depend on it.
    #[arg(long, value_name = "N", default_value_t = crate::tiling::DEFAULT_TILE)]
    pub tile: usize,
    /// Also score no smoothing, expansion and mean-field side by side (at the strength in
    /// use, or the model's, or 3), from one forest prediction per image; in --json under
    /// "smoothing".
    #[arg(long)]
    pub compare_smoothing: bool,
    #[command(flatten)]
    pub smoothing: SmoothArgs,
    #[command(flatten)]
    pub labels: LabelArgs,
}

pub fn run(args: EvalArgs, progress: Progress) -> Result<()> {
    crate::tiling::check_tile(args.tile)?;
    let model = crate::model::load(&args.model)?;
    let smoothing = args.smoothing.settings(&model.smoothing)?;
    let ds = open_dataset(&args.data, &args.labels)?;
    let inputs = ds.files().chain(std::iter::once(args.model.as_path()));
    let guard = crate::output_guard::OutputGuard::new(inputs, args.force);
    for out in args.json.iter().chain(&args.report) {
        guard.check_file(out)?;
    }
    if ds.classes != model.classes {
        return Err(GroveError::input(
            ds.root.join("classes.toml"),
            format!(
                "class table differs from the model's ({}); score with the table the model was trained with",
                model.classes.names().join(", ")
            ),
        ));
    }
    let entries = ds.labelled();
    if entries.is_empty() {
        return Err(GroveError::input(
            &ds.root,
            "no labelled images to score (labels/NAME.png)",
        ));
    }
    let trained: Vec<&str> = model
        .provenance
        .training_images
        .iter()
        .map(|t| t.name.as_str())
        .collect();
    let overlap = entries
        .iter()
        .filter(|e| {
            trained.contains(
                &e.image
                    .file_name()
                    .unwrap_or_default()
                    .to_string_lossy()
                    .as_ref(),
            )
        })
        .count();
    if overlap > 0 {
        eprintln!("warning: {overlap} of these images share a name with training images; scores on training images are optimistic");
    }
    let compared = if args.compare_smoothing {
        comparison_settings(&smoothing, &model.smoothing)
    } else {
        Vec::new()
    };
    // The settings in use first, then those of the comparison that differ from it.
    let mut settings = vec![smoothing.clone()];
    settings.extend(compared.iter().filter(|s| **s != smoothing).cloned());
    let mut pictures = Thumbnails::default();
    let scores = evaluate_smoothed(
        &model,
        &ds,
        &entries,
        args.tile,
        &settings,
        progress,
        // Thumbnails show the maps of the settings in use (the first).
        |e, img, p| match args.report {
            Some(_) => pictures.add(&ds, e, img, &p[0]),
            None => Ok(()),
        },
    )?;
    let report_of = |s: &SmoothSettings| {
        let i = settings.iter().position(|x| x == s).expect("scored");
        MetricsReport::new(&scores[i], &model.classes).smoothed_with(s)
    };
    let mut report = report_of(&smoothing);
    report.smoothing = compared
        .iter()
        .map(|s| (s.method.name().to_string(), report_of(s)))
        .collect();
    print!("{}", report.to_table());
    if args.compare_smoothing {
        print!("\n{}", report.comparison_table());
    }
    if let Some(path) = &args.json {
        crate::imageio::write_atomic(path, report.to_json().as_bytes())?;
        println!("\nscores written to {}", path.display());
    }
    if let Some(path) = &args.report {
        let mut page = Report::for_eval(&model, report, pictures);
        page.facts
            .push(("model file".into(), args.model.display().to_string()));
        page.facts
            .push(("scored on".into(), ds.root.display().to_string()));
        page.write(path)?;
        println!("report written to {}", path.display());
    }
    Ok(())
}

/// none, expansion and mean-field at one strength: the one in use, else the model's, else
/// the library default.
fn comparison_settings(
    in_use: &SmoothSettings,
    model: &crate::prediction::SmoothDefault,
) -> Vec<SmoothSettings> {
    let strength = if in_use.method != SmoothMethod::None {
        in_use.strength
    } else if model.method != SmoothMethod::None && model.strength > 0.0 {
        model.strength
    } else {
        SmoothSettings::default().strength
    };
    [
        SmoothMethod::None,
        SmoothMethod::Expansion,
        SmoothMethod::MeanField,
    ]
    .into_iter()
    .map(|method| SmoothSettings {
        method,
        strength,
        ..SmoothSettings::default()
    })
    .collect()
}

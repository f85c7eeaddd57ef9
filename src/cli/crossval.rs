//! `grove crossval`.

use std::path::PathBuf;
use std::time::Instant;

use clap::Args;

use crate::cli::open_dataset;
use crate::cli::train::TrainOptions;
use crate::error::{GroveError, Result};
use crate::eval::crossval::cross_validate;
use crate::eval::crossval_report::CrossvalReport;
use crate::progress::Progress;
use crate::report::{Report, Thumbnails};

#[derive(Args, Debug)]
pub struct CrossvalArgs {
    /// Dataset folder with images/, labels/ and classes.toml.
    pub data: PathBuf,
    /// Folds (2–1000). Images are dealt to folds at random (from --seed); with fewer labelled
    /// images than folds, each image is its own fold (leave-one-image-out).
    #[arg(long, short = 'k', default_value_t = 5, value_name = "K",
          value_parser = clap::value_parser!(u16).range(2..=1000))]
    pub folds: u16,
    /// Also write the scores as JSON: the keys of `eval --json` (pooled over all held-out
    /// predictions) plus `folds` and `summary` (mean ± sd over folds).
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Also write a self-contained HTML report.
    #[arg(long, value_name = "FILE.html")]
    pub report: Option<PathBuf>,
    /// Replace an existing file at --json or --report even if grove did not write it.
    #[arg(long)]
    pub force: bool,
    /// Predict in tiles of N × N pixels (plus a halo); 0 = whole images. Scores do not
    /// depend on it.
    #[arg(long, value_name = "N", default_value_t = crate::tiling::DEFAULT_TILE)]
    pub tile: usize,
    #[command(flatten)]
    pub train: TrainOptions,
}

pub fn run(args: CrossvalArgs, progress: Progress) -> Result<()> {
    let t0 = Instant::now();
    crate::tiling::check_tile(args.tile)?;
    let config = args.train.config();
    config.validate()?;
    // Scored as the forest's maps unless smoothing is asked for: the strength search of
    // `train` inside every fold would double the cost.
    let smoothing = crate::cli::SmoothArgs {
        smooth: args.train.smooth,
        smooth_strength: args.train.smooth_strength,
    }
    .settings(&crate::prediction::SmoothDefault::NONE)?;
    let ds = open_dataset(&args.data, &args.train.labels)?;
    let guard = crate::output_guard::OutputGuard::new(ds.files(), args.force);
    for out in args.json.iter().chain(&args.report) {
        guard.check_file(out)?;
    }
    let entries = ds.labelled();
    if entries.len() < 2 {
        return Err(GroveError::input(
            &ds.root,
            format!(
                "cross-validation by image needs at least 2 labelled images (labels/NAME.png), found {}",
                entries.len()
            ),
        ));
    }
    let mut pictures = Thumbnails::default();
    let cv = cross_validate(
        &config,
        &ds,
        &entries,
        args.folds as usize,
        args.tile,
        &smoothing,
        progress,
        |_, e, img, p| match args.report {
            Some(_) => pictures.add(&ds, e, img, p),
            None => Ok(()),
        },
    )?;
    let report = CrossvalReport::new(&cv, &ds.classes);
    let colour = std::io::IsTerminal::is_terminal(&std::io::stdout());
    print!("{}", report.to_table(colour));
    if let Some(path) = &args.json {
        crate::imageio::write_atomic(path, report.to_json().as_bytes())?;
        println!("\nscores written to {}", path.display());
    }
    if let Some(path) = &args.report {
        let mut page = Report::for_crossval(&cv, report, &ds.classes, pictures);
        page.facts
            .push(("data".into(), ds.root.display().to_string()));
        page.write(path)?;
        println!("report written to {}", path.display());
    }
    println!(
        "done in {:.1} s; train the final model on all images with the same options: grove train {} --model MODEL",
        t0.elapsed().as_secs_f64(),
        args.data.display()
    );
    Ok(())
}

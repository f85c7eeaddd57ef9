//! Command-line layer: parsing, thread setup, error printing. One file per command.

mod apply;
mod areas;
mod crossval;
mod demo;
mod eval;
mod info;
mod label;
mod merge_areas;
mod suggest;
pub(crate) mod train;

use clap::{Parser, Subcommand};

use crate::error::{ErrorKind, GroveError};
use crate::progress::Progress;

/// Train and apply CPU-only per-pixel segmenters from a few labelled images.
#[derive(Parser, Debug)]
#[command(name = "grove", version, about, long_about = None, propagate_version = true)]
pub struct Cli {
    /// Worker threads, 1–1024 (default: all cores).
    #[arg(long, global = true, value_name = "N", value_parser = clap::value_parser!(u16).range(1..=MAX_THREADS))]
    threads: Option<u16>,
    /// Largest image accepted, in megapixels, 0.001–100000 (default: available memory / 450
    /// bytes per pixel, at least 16). Images are checked by their header before decoding.
    /// Images that `apply` streams (PNG and TIFF above 8 megapixels, with --tile > 0) need
    /// memory by the tile, not by the image: only a value given here limits them.
    #[arg(long, global = true, value_name = "MP")]
    max_megapixels: Option<f64>,
    /// No progress bars (they are also off when stderr is not a terminal).
    #[arg(long, short, global = true)]
    quiet: bool,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Train a segmenter on a dataset folder (images/, labels/, classes.toml).
    #[command(
        after_help = "Example:\n  grove train fields/ --model fields.grove --trees 48 --texton-windows 9,25"
    )]
    Train(train::TrainArgs),
    /// Segment images with a trained model: label maps, overlays, confidence.
    #[command(
        after_help = "Examples:\n  grove apply fields.grove flight-07/ extra.tif --out maps/ --confidence\n  grove apply fields.grove 'flights/**/*.tif' --out maps/ --shard 3/8 --log-json   # one task of 8"
    )]
    Apply(apply::ApplyArgs),
    /// Score a model on a labelled dataset: accuracy, IoU per class, confusion matrix.
    #[command(after_help = "Example:\n  grove eval fields.grove held-out/ --json scores.json")]
    Eval(eval::EvalArgs),
    /// Cross-validate the training options by image: K folds, each scored by a model that
    /// never saw its images.
    #[command(
        after_help = "Example:\n  grove crossval fields/ --folds 5 --trees 48 --json cv.json --report cv.html\n\nTakes the same training options as `grove train`; writes no model."
    )]
    Crossval(crossval::CrossvalArgs),
    /// Generate the synthetic farm dataset, train, score and apply, end to end.
    Demo(demo::DemoArgs),
    /// Merge the area tables (areas.csv/json) of several apply output folders, e.g. shards.
    #[command(
        name = "merge-areas",
        after_help = "Example:\n  grove merge-areas maps/shard-*-of-8 --out maps/areas.csv"
    )]
    MergeAreas(merge_areas::MergeAreasArgs),
    /// Error-adjusted class areas with 95 % intervals, from apply's maps and reference labels.
    #[command(
        after_help = "Example:\n  grove areas maps/ --reference checked/ --pixel-size 0.05m --json areas-estimate.json\n\nStratified estimator of Olofsson et al. (2013, 2014). These are estimates: a qualified person should check them."
    )]
    Areas(areas::AreasArgs),
    /// Rank images by how much labelling them would help, and outline their unsure regions.
    #[command(
        after_help = "Example:\n  grove suggest fields.grove fields/ new-flights/ --top 5 --out next/ --json next.json\n\nPixels already labelled (a dataset folder's labels/, or --labels DIR) are never suggested."
    )]
    Suggest(suggest::SuggestArgs),
    /// Show what a model file holds: classes, training images, settings, top features.
    Info(info::InfoArgs),
    /// Label, train and review in the browser: a local workspace over a dataset folder.
    #[command(
        after_help = "Example:\n  grove label fields/            # prints http://127.0.0.1:PORT/?token=...\n\nThe server listens on 127.0.0.1 only and every request needs the printed token."
    )]
    Label(label::LabelCmdArgs),
}

/// Most worker threads accepted (more only costs start-up time and memory).
const MAX_THREADS: i64 = 1024;

/// Parses arguments, runs the command and returns the process exit code: 0 on success,
/// 2 for usage errors (clap's own code too), then one code per [`ErrorKind`]
/// (input data 3, model file 4, output 5, internal 70), documented in the README.
pub fn run() -> i32 {
    let cli = Cli::parse();
    if let Some(mp) = cli.max_megapixels {
        if !(0.001..=100_000.0).contains(&mp) {
            eprintln!("error: --max-megapixels {mp} must be between 0.001 and 100000");
            return ErrorKind::Usage.exit_code();
        }
        crate::image_check::set_max_pixels((mp * 1e6) as u64);
    }
    if let Some(n) = cli.threads {
        if let Err(e) = rayon::ThreadPoolBuilder::new()
            .num_threads(n as usize)
            .build_global()
        {
            eprintln!("error: cannot start {n} threads: {e}");
            return ErrorKind::Usage.exit_code();
        }
    }
    let progress =
        Progress::new(!cli.quiet && std::io::IsTerminal::is_terminal(&std::io::stderr()));
    // A panic is a bug, never the user's fault: it gets the internal-error code, not 101.
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| match cli.command {
        Command::Train(a) => train::run(a, progress),
        Command::Apply(a) => apply::run(a, progress),
        Command::Eval(a) => eval::run(a, progress),
        Command::Crossval(a) => crossval::run(a, progress),
        Command::Demo(a) => demo::run(a, progress),
        Command::Info(a) => info::run(a),
        Command::MergeAreas(a) => merge_areas::run(a),
        Command::Label(a) => label::run(a),
        Command::Suggest(a) => suggest::run(a, progress),
        Command::Areas(a) => areas::run(a),
    }))
    .unwrap_or_else(|_| {
        Err(GroveError::Internal(
            "a grove thread panicked (see the message above)".into(),
        ))
    });
    match result {
        Ok(()) => 0,
        Err(e) => {
            eprintln!("error: {e}");
            e.kind().exit_code()
        }
    }
}

/// Label-file options shared by the commands that read datasets.
#[derive(clap::Args, Debug, Clone)]
pub struct LabelArgs {
    /// Label value meaning "not labelled" in single-channel label files.
    #[arg(long, default_value_t = 255, value_name = "V")]
    unlabelled_value: u8,
    /// Treat label values or colours missing from classes.toml as unlabelled instead of failing.
    #[arg(long)]
    unknown_as_unlabelled: bool,
}

impl LabelArgs {
    pub(crate) fn options(&self) -> crate::dataset::LabelOptions {
        crate::dataset::LabelOptions {
            unlabelled_value: self.unlabelled_value,
            unknown_as_unlabelled: self.unknown_as_unlabelled,
        }
    }
}

/// Opens a dataset and prints its warnings.
fn open_dataset(
    path: &std::path::Path,
    labels: &LabelArgs,
) -> crate::Result<crate::dataset::Dataset> {
    let ds = crate::dataset::Dataset::open(path, labels.options())?;
    for w in &ds.warnings {
        eprintln!("warning: {w}");
    }
    Ok(ds)
}

/// Smoothing options shared by `apply` and `eval` (and `train`, where they fix the model's
/// default instead of searching for it).
#[derive(clap::Args, Debug, Clone, Default)]
pub struct SmoothArgs {
    /// Pairwise smoothing of the label map (contrast-sensitive Potts CRF): expansion (graph
    /// cuts, labels only), meanfield (also smooths the probabilities, so confidence and
    /// uncertainty maps show the smoothed ones) or none. Default: the model's (`grove info`).
    #[arg(long, value_name = "METHOD")]
    pub smooth: Option<crate::smooth::SmoothMethod>,
    /// Smoothing strength W ≥ 0 (0 = none): the cost, in units of −ln p, of two neighbouring
    /// pixels of equal colour taking different classes. Default: the model's, or 3.
    #[arg(long, value_name = "W", allow_negative_numbers = true)]
    pub smooth_strength: Option<f32>,
}

impl SmoothArgs {
    /// The settings to use: these options over the model's default `model`. A strength without
    /// a method takes the model's method (expansion if the model smooths not at all); a
    /// method without a strength takes the model's strength (3 if it has none).
    pub fn settings(
        &self,
        model: &crate::prediction::SmoothDefault,
    ) -> crate::Result<crate::smooth::SmoothSettings> {
        use crate::smooth::{SmoothMethod, SmoothSettings};
        check_strength(self.smooth_strength)?;
        let model_smooths = model.method != SmoothMethod::None && model.strength > 0.0;
        let method = self
            .smooth
            .unwrap_or(match (self.smooth_strength, model_smooths) {
                (Some(_), false) => SmoothMethod::Expansion,
                _ => model.method,
            });
        let strength = self.smooth_strength.unwrap_or(if model_smooths {
            model.strength
        } else {
            SmoothSettings::default().strength
        });
        let settings = crate::prediction::SmoothDefault { method, strength }.settings();
        settings.validate()?;
        Ok(settings)
    }
}

/// Checks a `--smooth-strength` value.
pub(crate) fn check_strength(strength: Option<f32>) -> crate::Result<()> {
    match strength {
        Some(w) if !(w.is_finite() && w >= 0.0) => Err(GroveError::Config(format!(
            "--smooth-strength {w}: give a finite number ≥ 0 (0 = no smoothing; 1–8 is the usual range)"
        ))),
        _ => Ok(()),
    }
}

//! `grove train`.

use std::path::PathBuf;
use std::time::Instant;

use clap::Args;

use crate::cli::{check_strength, open_dataset, LabelArgs};
use crate::error::Result;
use crate::progress::Progress;
use crate::segmenter::TrainConfig;
use crate::smooth::SmoothMethod;
use crate::train::SmoothingRequest;

/// Warn when a position feature ranks among this many most important features. On the
/// fixed-camera street frames of issue 6 they were the top two, and the held-out frame
/// scored 0.941 mean IoU with them but 0.779 without; the top five of ~80 leaves a margin.
const POSITION_WARN_RANK: usize = 5;

#[derive(Args, Debug)]
pub struct TrainArgs {
    /// Dataset folder with images/, labels/ and classes.toml.
    pub data: PathBuf,
    /// Where to write the model file (never one of the dataset's files).
    #[arg(long, short, value_name = "FILE")]
    pub model: PathBuf,
    /// Replace an existing file at --model even if grove did not write it.
    #[arg(long)]
    pub force: bool,
    #[command(flatten)]
    pub options: TrainOptions,
}

/// How to train: shared by `train` and `crossval`, so a cross-validated setting is exactly
/// the one `train` would use.
#[derive(Args, Debug)]
pub struct TrainOptions {
    /// Trees in the forest (1–4096).
    #[arg(long, default_value_t = 32, value_name = "N")]
    pub trees: usize,
    /// Maximum tree depth (1–64).
    #[arg(long, default_value_t = 20, value_name = "N")]
    pub max_depth: usize,
    /// Minimum training samples in a leaf (1–1000000).
    #[arg(long, default_value_t = 2, value_name = "N")]
    pub min_leaf: usize,
    /// Labelled pixels sampled per image, split equally among the classes it contains
    /// (1–1000000).
    #[arg(long, default_value_t = 5000, value_name = "N")]
    pub samples_per_image: usize,
    /// Texton dictionary size (0–1024; 0 turns texton features off).
    #[arg(long, default_value_t = 32, value_name = "K")]
    pub textons: usize,
    /// Texton histogram window sides in pixels (odd, 1–65535; one or two values).
    #[arg(long, value_delimiter = ',', default_value = "15", value_name = "PX")]
    pub texton_windows: Vec<usize>,
    /// Filter scales (Gaussian sigma in pixels, each in (0, 64], at most 16 distinct).
    #[arg(
        long,
        value_delimiter = ',',
        default_value = "1,2,4,8",
        value_name = "SIGMAS"
    )]
    pub scales: Vec<f32>,
    /// Filter lightness only, not the a/b colour channels.
    #[arg(long)]
    pub no_chroma_filters: bool,
    /// Add the x/y position of a pixel as features. Only for images where a class sits in the
    /// same place every time (registered scans, a fixed camera); elsewhere they learn where
    /// things happened to be and the score will not carry over.
    #[arg(long)]
    pub position: bool,
    /// Random seed. The same seed and data give the same model on any thread count (the file
    /// also records its creation time; set SOURCE_DATE_EPOCH to pin that too).
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
    /// The model's default smoothing method (expansion, meanfield, none). Without
    /// --smooth-strength the strength is chosen on held-out training images. In `crossval`:
    /// the smoothing applied to the maps it scores (none unless given).
    #[arg(long, value_name = "METHOD")]
    pub smooth: Option<SmoothMethod>,
    /// The model's default smoothing strength (≥ 0; 0 = none), instead of choosing it from
    /// 0,1,2,3,5,8 by the mean IoU of a quick 12-tree forest on held-out training images.
    #[arg(long, value_name = "W", allow_negative_numbers = true)]
    pub smooth_strength: Option<f32>,
    #[command(flatten)]
    pub labels: LabelArgs,
}

impl TrainOptions {
    pub fn config(&self) -> TrainConfig {
        let mut cfg = TrainConfig {
            samples_per_image: self.samples_per_image,
            seed: self.seed,
            ..TrainConfig::default()
        };
        cfg.forest.n_trees = self.trees;
        cfg.forest.max_depth = self.max_depth;
        cfg.forest.min_samples_leaf = self.min_leaf;
        cfg.features.textons = self.textons;
        cfg.features.texton_windows = self.texton_windows.clone();
        cfg.features.bank.scales = self.scales.clone();
        cfg.features.bank.filter_chroma = !self.no_chroma_filters;
        cfg.features.position = self.position;
        cfg
    }
}

pub fn run(args: TrainArgs, progress: Progress) -> Result<()> {
    let t0 = Instant::now();
    let config = args.options.config();
    config.validate()?;
    check_strength(args.options.smooth_strength)?;
    let ds = open_dataset(&args.data, &args.options.labels)?;
    // Before any work: an hour of training must not end in "cannot write".
    crate::output_guard::OutputGuard::new(ds.files(), args.force).check_file(&args.model)?;
    let entries = ds.labelled();
    let trained = crate::train::train(
        &config,
        &ds,
        &entries,
        SmoothingRequest {
            method: args.options.smooth,
            strength: args.options.smooth_strength,
        },
        progress,
    )?;
    if let Some(e) = &trained.search_failed {
        eprintln!("warning: could not choose a smoothing strength on held-out training images ({e}); using the default");
    }
    let model = &trained.model;
    crate::model::save(model, &args.model)?;
    let p = &model.provenance;
    let seconds = t0.elapsed().as_secs_f64();
    let unlabelled = ds.entries.len() - entries.len();
    println!(
        "trained on {} image{}{} ({} sampled pixels, {} features) in {seconds:.1} s",
        entries.len(),
        if entries.len() == 1 { "" } else { "s" },
        if unlabelled > 0 {
            format!(" ({unlabelled} more without a label file)")
        } else {
            String::new()
        },
        p.samples_per_class.iter().sum::<u64>(),
        model.features.n_features(),
    );
    println!("smoothing default: {}", trained.smoothing_statement());
    if trained.strength_searched() {
        println!("  (--smooth-strength W sets the strength and skips this search)");
    }
    let ranked = model.ranked_importances();
    let top: Vec<String> = ranked
        .iter()
        .take(5)
        .map(|(n, v)| format!("{n} {v:.3}"))
        .collect();
    println!("most informative features: {}", top.join(", "));
    if let Some(rank) = model.position_rank().filter(|&r| r < POSITION_WARN_RANK) {
        eprintln!(
            "warning: a position feature is the number {} feature of {}; the model has learnt where classes happened to sit in these images, which rarely carries over to new ones. Unless every image shows the same place in the same framing, retrain without --position and compare held-out scores with `grove eval`",
            rank + 1,
            ranked.len()
        );
    }
    if let Some(oob) = p.oob_accuracy {
        println!("out-of-bag accuracy on sampled pixels: {oob:.4}");
        println!("  this is optimistic: the trees are checked on pixels of the same images they learnt from, which look alike; a score on held-out images is the one to trust (grove crossval on this dataset, or grove eval on labelled images not used for training)");
    }
    println!("model written to {}", args.model.display());
    println!(
        "next: grove apply {} IMAGES... --out DIR",
        args.model.display()
    );
    Ok(())
}

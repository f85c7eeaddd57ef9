//! `grove train`.

use std::path::PathBuf;
use std::time::Instant;

use clap::Args;

use crate::cli::{open_dataset, LabelArgs};
use crate::error::Result;
use crate::progress::Progress;
use crate::segmenter::TrainConfig;

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
    #[command(flatten)]
    pub labels: LabelArgs,
}

impl TrainArgs {
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
    let config = args.config();
    config.validate()?;
    let ds = open_dataset(&args.data, &args.labels)?;
    // Before any work: an hour of training must not end in "cannot write".
    crate::output_guard::OutputGuard::new(ds.files(), args.force).check_file(&args.model)?;
    let entries = ds.labelled();
    let model = config.fit(&ds, &entries, progress)?;
    crate::model::save(&model, &args.model)?;
    let p = &model.provenance;
    let unlabelled = ds.entries.len() - entries.len();
    println!(
        "trained on {} image{}{} ({} sampled pixels, {} features) in {:.1} s",
        entries.len(),
        if entries.len() == 1 { "" } else { "s" },
        if unlabelled > 0 {
            format!(" ({unlabelled} more without a label file)")
        } else {
            String::new()
        },
        p.samples_per_class.iter().sum::<u64>(),
        model.features.n_features(),
        t0.elapsed().as_secs_f64()
    );
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
        println!("  this is optimistic: the trees are checked on pixels of the same images they learnt from, which look alike; a score on held-out images is the one to trust (grove eval on labelled images not used for training)");
    }
    println!("model written to {}", args.model.display());
    println!(
        "next: grove apply {} IMAGES... --out DIR",
        args.model.display()
    );
    Ok(())
}

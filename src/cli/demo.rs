//! `grove demo`: the whole job on built-in synthetic data, as a first run and a smoke test.

use std::path::{Path, PathBuf};
use std::time::Instant;

use clap::Args;

use crate::dataset::{Dataset, ImageEntry, LabelOptions};
use crate::demo::write_demo_dataset;
use crate::error::Result;
use crate::eval::areas::{count_classes, AreaTable};
use crate::eval::score::{evaluate_smoothed, MetricsReport};
use crate::imageio::{read_image, write_atomic, RasterImage};
use crate::outputs::{write_outputs, OutputOptions};
use crate::prediction::{describe, Prediction};
use crate::progress::Progress;
use crate::segmenter::TrainConfig;
use crate::smooth::{SmoothMethod, SmoothSettings};
use crate::tiling::DEFAULT_TILE;

#[derive(Args, Debug)]
pub struct DemoArgs {
    /// Folder for the generated data, the model, predictions and metrics.json.
    #[arg(long, short, default_value = "grove-demo", value_name = "DIR")]
    pub out: PathBuf,
    /// Scenes to generate (the last third are held out for scoring).
    #[arg(long, default_value_t = 20, value_name = "N")]
    pub images: usize,
    /// Scene side in pixels.
    #[arg(long, default_value_t = 384, value_name = "PX")]
    pub size: usize,
    /// Seed of the scene generator and of training.
    #[arg(long, default_value_t = 7)]
    pub seed: u64,
    /// Replace existing files in the output places that grove did not write.
    #[arg(long)]
    pub force: bool,
}

pub fn run(args: DemoArgs, progress: Progress) -> Result<()> {
    if args.images < 2 || args.size < 64 {
        return Err(crate::GroveError::Config(
            "the demo needs at least 2 images of at least 64 px".into(),
        ));
    }
    let t0 = Instant::now();
    let out = &args.out;
    crate::output_guard::OutputGuard::new(std::iter::empty(), args.force)
        .check_grove_folder(out)?;
    let n_test = (args.images / 3).max(1);
    let n_train = args.images - n_test;
    let (train_dir, test_dir) = (out.join("train"), out.join("test"));
    write_demo_dataset(&train_dir, 0..n_train as u32, args.size, args.seed)?;
    write_demo_dataset(
        &test_dir,
        n_train as u32..args.images as u32,
        args.size,
        args.seed,
    )?;
    println!(
        "generated {n_train} training and {n_test} held-out farm scenes ({0}x{0} px) in {1} and {2}",
        args.size,
        train_dir.display(),
        test_dir.display()
    );

    let train = Dataset::open(&train_dir, LabelOptions::default())?;
    let cfg = TrainConfig {
        seed: args.seed,
        ..TrainConfig::default()
    };
    let t_train = Instant::now();
    let entries = train.labelled();
    // The one training path of `grove train` and the workspace page, so the demo's model is
    // the command's model and states its smoothing choice in the same words.
    let trained = crate::train::train(
        &cfg,
        &train,
        &entries,
        crate::train::SmoothingRequest::default(),
        progress,
    )?;
    println!("smoothing: {}", trained.smoothing_statement());
    let model = trained.model;
    let model_path = out.join("model.grove");
    crate::model::save(&model, &model_path)?;
    println!(
        "trained in {:.1} s -> {}",
        t_train.elapsed().as_secs_f64(),
        model_path.display()
    );

    let test = Dataset::open(&test_dir, LabelOptions::default())?;
    let pred_dir = out.join("predictions");
    let opts = OutputOptions {
        confidence: true,
        ..OutputOptions::default()
    };
    let areas = std::cell::RefCell::new(AreaTable::new(model.classes.names(), None));
    let deliver = |e: &ImageEntry, img: &RasterImage, pred: &Prediction| {
        let index = write_outputs(&pred_dir, &e.stem, img, pred, &model.classes, &opts, &[])?.index;
        let counts = count_classes(&index, model.classes.len(), None);
        areas.borrow_mut().add_counts(&e.stem, &counts);
        Ok(())
    };
    // Scored without and with the model's smoothing, from one prediction per image; the
    // smoothed maps are delivered.
    let smoothing = model.smoothing.settings();
    let none = SmoothSettings {
        method: SmoothMethod::None,
        ..SmoothSettings::default()
    };
    let settings = [none, smoothing.clone()];
    let scores = evaluate_smoothed(
        &model,
        &test,
        &test.labelled(),
        DEFAULT_TILE,
        &settings,
        progress,
        |e, img, preds| deliver(e, img, &preds[1]),
    )?;
    let reports: Vec<MetricsReport> = scores
        .iter()
        .zip(&settings)
        .map(|(sc, st)| MetricsReport::new(sc, &model.classes).smoothed_with(st))
        .collect();
    let mut report = reports[1].clone();
    println!("\nheld-out scores:\n{}", report.to_table());
    let f1 = |r: &MetricsReport| r.boundary_f1.map_or("-".into(), |b| format!("{b:.4}"));
    println!(
        "held-out without smoothing: mean IoU {:.4}, boundary F1 {}; with the model's smoothing ({}): mean IoU {:.4}, boundary F1 {}\n",
        reports[0].mean_iou,
        f1(&reports[0]),
        describe(&smoothing),
        reports[1].mean_iou,
        f1(&reports[1])
    );
    report.smoothing = if smoothing.method == SmoothMethod::None {
        Vec::new()
    } else {
        reports
            .into_iter()
            .zip(&settings)
            .map(|(r, s)| (s.method.name().to_string(), r))
            .collect()
    };
    let metrics_path = out.join("metrics.json");
    write_atomic(&metrics_path, report.to_json().as_bytes())?;
    for e in &train.entries {
        let img = read_image(&e.image)?;
        deliver(e, &img, &model.predict(&img, DEFAULT_TILE, &smoothing))?;
    }
    areas.borrow().write(&pred_dir)?;
    // As apply does: the folder is then readable on its own (`grove areas` needs the names).
    write_atomic(
        &pred_dir.join("classes.toml"),
        model.classes.to_toml().as_bytes(),
    )?;
    println!("outputs:");
    let show = |what: &str, p: &Path| println!("  {what:<22} {}", p.display());
    show("model", &model_path);
    show("scores", &metrics_path);
    show("label maps", &pred_dir.join("labels"));
    show("overlays", &pred_dir.join("overlays"));
    show("confidence maps", &pred_dir.join("confidence"));
    show("class areas", &pred_dir.join("areas.csv"));
    println!(
        "done in {:.1} s. The same steps by hand:",
        t0.elapsed().as_secs_f64()
    );
    let (m, o) = (model_path.display(), out.display());
    println!("  grove train {} --model {m}", train_dir.display());
    println!(
        "  grove eval {m} {} --json {o}/metrics.json",
        test_dir.display()
    );
    println!(
        "  grove apply {m} {} {} --out {o}/predictions --confidence",
        train_dir.display(),
        test_dir.display()
    );
    Ok(())
}

//! Work that takes longer than a request: training (`TrainConfig::fit` on a background
//! thread, its stages followed through `Progress::observed`, so the page keeps working and
//! polls for progress), and the layers computed from the current model for one image
//! (prediction, uncertainty and the prediction smoothed with the model's default, from
//! `Segmenter::predictions`), cached per model generation, with the regions `grove suggest`
//! would offer for it (`eval::suggest::suggest_image`, default settings, labelled pixels
//! excluded). With enough labelled images,
//! training also cross-validates by image (`eval::crossval`, the call `grove crossval`
//! makes), and the page shows that score instead of the optimistic out-of-bag one.

use std::collections::HashMap;
use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex, RwLock};
use std::time::Instant;

use indicatif::ProgressBar;
use serde_json::{json, Value};

use super::dataset_api::find_image;
use super::http::Reply;
use super::security::inside;
use super::Workspace;
use crate::dataset::save::label_path;
use crate::dataset::{list_images, Dataset, ImageEntry, UNLABELLED};
use crate::error::{GroveError, Result};
use crate::eval::areas::{count_classes, AreaTable};
use crate::eval::crossval::cross_validate;
use crate::eval::crossval_report::CrossvalReport;
use crate::eval::suggest::{rank, suggest_image, Region, SuggestConfig};
use crate::eval::suggest_files::{known_pixels, suggest_file};
use crate::imageio::{encode_png, read_image};
use crate::prediction::Prediction;
use crate::progress::Progress;
use crate::segmenter::{Segmenter, TrainConfig};
use crate::smooth::{SmoothMethod, SmoothSettings};
use crate::tiling::DEFAULT_TILE;
use crate::train::SmoothingRequest;

/// The stage bar of the training that is running (one per process: `Progress` observers
/// are plain functions).
static STAGE: Mutex<Option<(String, ProgressBar)>> = Mutex::new(None);

fn observe_stage(name: &str, bar: &ProgressBar) {
    *STAGE.lock().expect("stage lock poisoned") = Some((name.to_string(), bar.clone()));
}

#[derive(Clone)]
enum TrainState {
    Idle,
    Running {
        started: Instant,
    },
    Done {
        seconds: f64,
        images: usize,
        /// The model's smoothing default and why, as `grove train` states it.
        smoothing: String,
    },
    Failed {
        message: String,
    },
}

/// What runs after a training, once its model is saved and shown: stage name, images done,
/// images in all.
type Background = (&'static str, usize, usize);
/// Layers of one image under one model.
struct ImageLayers {
    width: usize,
    height: usize,
    /// Class index (of the model's table) per pixel.
    prediction: Vec<u8>,
    /// 0 = sure, 1 = as unsure as the class count allows.
    uncertainty: Vec<f32>,
    /// Class index per pixel after pairwise smoothing (the model's default settings).
    smoothed: Vec<u8>,
    /// The regions `grove suggest` would offer here, best first.
    regions: Vec<Region>,
}

pub struct Jobs {
    model: RwLock<Option<Arc<Segmenter>>>,
    /// Bumped whenever the model changes; layers and scores name the generation they show.
    generation: AtomicU64,
    train: Mutex<TrainState>,
    layers: Mutex<Vec<(String, u64, Arc<ImageLayers>)>>,
    held_out: Mutex<Option<HeldOut>>,
    ranking: Mutex<Option<Ranking>>,
    background: Mutex<Option<Background>>,
}

/// The images ranked by what labelling them could settle, under one model generation.
struct Ranking {
    generation: u64,
    /// Rank per image name (1 = label this next), as `grove suggest` on DATA/images ranks.
    ranks: HashMap<String, usize>,
}

/// Fewest labelled images for which the workspace cross-validates after training. Below it
/// a fold would train on one or two images and its score say little; a rule of thumb, not a
/// measurement.
pub const CROSSVAL_MIN_IMAGES: usize = 4;

/// Folds of the workspace's cross-validation (fewer images: leave-one-image-out).
const CROSSVAL_FOLDS: usize = 5;

/// A cross-validation of the training that made one model generation.
struct HeldOut {
    generation: u64,
    /// What `model_summary` shows as `scores`.
    summary: Value,
    /// Mean IoU per image name, each scored by a fold model that did not see it.
    per_image: HashMap<String, f64>,
}

/// Layer sets cached (each is a few bytes per pixel).
const KEEP_LAYERS: usize = 4;

impl Jobs {
    /// Starts from the model file if it exists.
    pub fn new(model_path: &Path) -> Result<Jobs> {
        let model = if model_path.is_file() {
            Some(Arc::new(crate::model::load(model_path)?))
        } else {
            None
        };
        Ok(Jobs {
            generation: AtomicU64::new(model.is_some() as u64),
            model: RwLock::new(model),
            train: Mutex::new(TrainState::Idle),
            layers: Mutex::new(Vec::new()),
            held_out: Mutex::new(None),
            ranking: Mutex::new(None),
            background: Mutex::new(None),
        })
    }

    fn model(&self) -> Option<(Arc<Segmenter>, u64)> {
        let m = self.model.read().expect("model lock poisoned").clone()?;
        Some((m, self.generation.load(Ordering::SeqCst)))
    }

    /// What the page shows about the model: classes, images, and the score it has.
    pub fn model_summary(&self) -> Value {
        let Some((m, generation)) = self.model() else {
            return Value::Null;
        };
        let p = &m.provenance;
        let held_out = self.held_out.lock().expect("held-out lock poisoned");
        let crossval_coming =
            p.training_images.len() >= CROSSVAL_MIN_IMAGES && self.background().is_some();
        let scores = match held_out.as_ref().filter(|h| h.generation == generation) {
            Some(h) => h.summary.clone(),
            None => json!({
                "kind": "oob",
                "oob_accuracy": p.oob_accuracy,
                "crossval_pending": crossval_coming,
                "caveat": if crossval_coming {
                    "out-of-bag accuracy on sampled pixels of the training images: optimistic, because pixels of one image are alike; the cross-validation by image that replaces it is running".to_string()
                } else {
                    format!("out-of-bag accuracy on sampled pixels of the training images: optimistic, because pixels of one image are alike; a held-out image score is the honest one (from {CROSSVAL_MIN_IMAGES} labelled images on, training also cross-validates by image)")
                },
            }),
        };
        json!({
            "generation": generation,
            "classes": m.classes.names(),
            "images": p.training_images.len(),
            "created_unix": p.created_unix,
            "scores": scores,
        })
    }

    /// Suggestion rank per image name (1 = label this next) under the current model, and
    /// how many images were ranked.
    pub fn suggestion_ranks(&self) -> (HashMap<String, usize>, usize) {
        let generation = self.generation.load(Ordering::SeqCst);
        let ranking = self.ranking.lock().expect("ranking lock poisoned");
        ranking
            .as_ref()
            .filter(|r| r.generation == generation)
            .map_or_else(Default::default, |r| (r.ranks.clone(), r.ranks.len()))
    }

    /// The last held-out score per image name (mean IoU of the cross-validation fold model
    /// that did not see it), and whether it is of the current model.
    pub fn image_scores(&self) -> (HashMap<String, f64>, bool) {
        let generation = self.generation.load(Ordering::SeqCst);
        let held_out = self.held_out.lock().expect("held-out lock poisoned");
        held_out.as_ref().map_or_else(Default::default, |h| {
            (h.per_image.clone(), h.generation == generation)
        })
    }

    fn background(&self) -> Option<Background> {
        *self.background.lock().expect("background lock poisoned")
    }

    fn set_background(&self, b: Option<Background>) {
        *self.background.lock().expect("background lock poisoned") = b;
    }

    /// A newer training has started (or finished) since `generation`'s: its work is moot.
    fn superseded(&self, generation: u64) -> bool {
        self.generation.load(Ordering::SeqCst) != generation
            || matches!(
                *self.train.lock().expect("train lock poisoned"),
                TrainState::Running { .. }
            )
    }

    pub fn status_json(&self) -> Value {
        let state = self.train.lock().expect("train lock poisoned").clone();
        match state {
            TrainState::Idle => json!({"state": "idle"}),
            TrainState::Running { started } => {
                let stage = STAGE.lock().expect("stage lock poisoned").clone();
                let (name, pos, len) = match stage {
                    Some((n, bar)) => (n, bar.position(), bar.length()),
                    None => ("starting".to_string(), 0, None),
                };
                json!({
                    "state": "running",
                    "stage": name,
                    "done": pos,
                    "total": len,
                    "seconds": started.elapsed().as_secs_f64(),
                })
            }
            TrainState::Done {
                seconds,
                images,
                smoothing,
            } => json!({
                "state": "done",
                "seconds": seconds,
                "images": images,
                "smoothing": smoothing,
                "generation": self.generation.load(Ordering::SeqCst),
                "background": self.background().map(|(stage, done, total)| {
                    json!({"stage": stage, "done": done, "total": total})
                }),
            }),
            TrainState::Failed { message } => json!({"state": "failed", "message": message}),
        }
    }
}

/// Starts training on every labelled image, unless a training is running. The training
/// counts as done once its model is saved; the images are then ranked for labelling and, with
/// enough labelled images, cross-validated, in the background (a newer training stops that).
pub fn start_training(ws: &Arc<Workspace>) -> Reply {
    {
        let mut state = ws.jobs.train.lock().expect("train lock poisoned");
        if matches!(*state, TrainState::Running { .. }) {
            return Reply::error(409, "a training is already running");
        }
        *state = TrainState::Running {
            started: Instant::now(),
        };
    }
    *STAGE.lock().expect("stage lock poisoned") = None;
    let ws = ws.clone();
    std::thread::spawn(move || {
        if let Err(e) = train_then_review(&ws) {
            *ws.jobs.train.lock().expect("train lock poisoned") = TrainState::Failed {
                message: e.to_string(),
            };
        }
        ws.jobs.set_background(None);
    });
    Reply::json(202, &json!({"state": "running"}))
}

/// The images the page has labelled: a label file it saved empty (everything erased) is not a
/// training image.
fn training_entries(ds: &Dataset) -> Result<Vec<&ImageEntry>> {
    let mut entries = Vec::new();
    for e in ds.labelled() {
        if ds
            .load_labels_checked(e)?
            .1
            .indices
            .iter()
            .any(|&c| c != UNLABELLED)
        {
            entries.push(e);
        }
    }
    Ok(entries)
}

/// `grove train DATA --model FILE` with default settings (`train::train`, the same call), the
/// model published; then the ranking of `grove suggest` and the cross-validation of
/// `grove crossval`, each published when it is ready. Errors before the model is published
/// fail the training; later ones only leave the out-of-bag score and no ranks.
fn train_then_review(ws: &Workspace) -> Result<()> {
    let started = Instant::now();
    let ds = Dataset::open(&ws.root, ws.label_options)?;
    let entries = training_entries(&ds)?;
    let config = TrainConfig::default();
    let progress = Progress::observed(observe_stage);
    let trained = crate::train::train(
        &config,
        &ds,
        &entries,
        SmoothingRequest::default(),
        progress,
    )?;
    crate::model::save(&trained.model, &ws.model_path)?;
    let smoothing = trained.smoothing_statement();
    let model = Arc::new(trained.model);
    let generation = {
        let mut state = ws.jobs.train.lock().expect("train lock poisoned");
        *ws.jobs.model.write().expect("model lock poisoned") = Some(model.clone());
        let generation = ws.jobs.generation.fetch_add(1, Ordering::SeqCst) + 1;
        ws.jobs.set_background(Some(("ranking images", 0, 0)));
        *state = TrainState::Done {
            seconds: started.elapsed().as_secs_f64(),
            images: entries.len(),
            smoothing,
        };
        generation
    };
    // The review runs on all cores but one, so the page's own requests (the layers of the
    // image on screen, the image list) are not queued behind it: measured with
    // benches/workspace.sh, click → "trained on" shown took 1.29x `grove train` with the
    // review on every core, against 1.05x through the API alone.
    let review_threads = rayon::current_num_threads().saturating_sub(1).max(1);
    match rayon::ThreadPoolBuilder::new()
        .num_threads(review_threads)
        .build()
    {
        Ok(pool) => pool.install(|| review(ws, &ds, &entries, &config, &model, generation)),
        Err(_) => review(ws, &ds, &entries, &config, &model, generation),
    }
    Ok(())
}

/// The ranking of `grove suggest` and, with enough labelled images, the cross-validation of
/// `grove crossval`, each published when it is ready.
fn review(
    ws: &Workspace,
    ds: &Dataset,
    entries: &[&ImageEntry],
    config: &TrainConfig,
    model: &Segmenter,
    generation: u64,
) {
    rank_images(ws, model, generation);
    if entries.len() >= CROSSVAL_MIN_IMAGES && !ws.jobs.superseded(generation) {
        ws.jobs
            .set_background(Some(("cross-validating", 0, entries.len())));
        let mut scored = 0;
        let cv = cross_validate(
            config,
            ds,
            entries,
            CROSSVAL_FOLDS,
            DEFAULT_TILE,
            &model.smoothing.settings(),
            Progress::new(false),
            |_, _, _, _| {
                scored += 1;
                ws.jobs
                    .set_background(Some(("cross-validating", scored, entries.len())));
                if ws.jobs.superseded(generation) {
                    return Err(GroveError::Data("superseded by a newer training".into()));
                }
                Ok(())
            },
        );
        if let Ok(cv) = cv {
            let (summary, per_image) = held_out_figures(&CrossvalReport::new(&cv, &ds.classes));
            *ws.jobs.held_out.lock().expect("held-out lock poisoned") = Some(HeldOut {
                generation,
                summary,
                per_image,
            });
        }
    }
}

/// Ranks every image of DATA/images as `grove suggest MODEL DATA/images` does (the same
/// `suggest_file` and `rank` calls, default settings). An image that cannot be read or whose
/// labels do not fit the model is left unranked.
fn rank_images(ws: &Workspace, model: &Segmenter, generation: u64) {
    let Ok(images) = list_images(&ws.root.join("images")) else {
        return;
    };
    let images: Vec<_> = images
        .into_iter()
        .filter(|p| inside(&ws.root, p).is_some())
        .collect();
    let cfg = SuggestConfig::default();
    let mut found = Vec::new();
    for (i, path) in images.iter().enumerate() {
        if ws.jobs.superseded(generation) {
            return;
        }
        ws.jobs
            .set_background(Some(("ranking images", i, images.len())));
        if let Ok(f) = suggest_file(model, path, None, &ws.label_options, &cfg) {
            found.push(f.suggestion);
        }
    }
    rank(&mut found);
    let ranks = found
        .into_iter()
        .enumerate()
        .map(|(i, s)| (s.image, i + 1))
        .collect();
    *ws.jobs.ranking.lock().expect("ranking lock poisoned") = Some(Ranking { generation, ranks });
}

/// Cross-validation figures for the page: its `scores` object and mean IoU per image.
type HeldOutFigures = (Value, HashMap<String, f64>);

/// What the page shows of a cross-validation (keys read by `renderModel` in app.js).
fn held_out_figures(r: &CrossvalReport) -> HeldOutFigures {
    let mean = r.summary.mean_iou;
    let summary = json!({
        "kind": "crossval",
        "folds": r.n_folds,
        "mean_iou": mean.map_or(r.pooled.mean_iou, |m| m.mean),
        "mean_iou_sd": mean.and_then(|m| m.sd).unwrap_or(0.0),
        "pixel_accuracy": r.pooled.pixel_accuracy,
        "per_class_iou": r.pooled.per_class_iou,
        "caveat": "cross-validated by image: each image scored by a model trained without it (mean ± sd over folds; per-class IoU pooled over all held-out images)",
    });
    let per_image = r
        .pooled
        .per_image
        .iter()
        .filter_map(|i| Some((i.image.clone(), i.mean_iou?)))
        .collect();
    (summary, per_image)
}

pub fn training_status(ws: &Workspace) -> Reply {
    Reply::json(200, &ws.jobs.status_json())
}

/// The layers of `name` under the current model, computed on first use.
fn layers_of(
    ws: &Workspace,
    name: &str,
) -> std::result::Result<(Arc<ImageLayers>, Arc<Segmenter>, u64), Reply> {
    let path = find_image(ws, name)?;
    let Some((model, generation)) = ws.jobs.model() else {
        return Err(Reply::error(409, "no model yet: train first"));
    };
    if let Some((_, _, l)) = ws
        .jobs
        .layers
        .lock()
        .expect("layer lock poisoned")
        .iter()
        .find(|(n, g, _)| n == name && *g == generation)
    {
        return Ok((l.clone(), model, generation));
    }
    let image = read_image(&path).map_err(|e| Reply::error(422, e.to_string()))?;
    let image = if model.features.channels == 3 {
        image.to_rgb()
    } else {
        image
    };
    if model.features.channels == 1 && !image.is_grey() {
        return Err(Reply::error(
            409,
            "the model was trained on grey images; this one is in colour: retrain",
        ));
    }
    // Unsmoothed and with the model's default smoothing, from one forest pass (the same
    // library call as `grove apply` and `grove eval`).
    let none = SmoothSettings {
        method: SmoothMethod::None,
        ..SmoothSettings::default()
    };
    let settings = [none, model.smoothing.settings()];
    let [plain, smoothed]: [Prediction; 2] = model
        .predictions(&image, DEFAULT_TILE, &settings)
        .try_into()
        .expect("two settings, two predictions");
    let probs = plain.probabilities;
    let k = probs.n_classes as f32;
    let floor = 1.0 / k;
    let uncertainty = probs
        .confidence()
        .into_iter()
        .map(|c| ((1.0 - c) / (1.0 - floor)).clamp(0.0, 1.0))
        .collect();
    // Pixels the user has labelled are never suggested, as in `grove suggest --labels`; an
    // unreadable label file only means none are excluded (the label API reports it).
    let lpath = label_path(&ws.root, name);
    let known = lpath
        .is_file()
        .then(|| {
            known_pixels(
                &lpath,
                &model,
                &ws.label_options,
                (probs.width, probs.height),
            )
            .ok()
        })
        .flatten();
    let regions = suggest_image(
        name,
        &probs,
        known.as_deref(),
        &model.classes.names(),
        &SuggestConfig::default(),
    )
    .regions;
    let layers = Arc::new(ImageLayers {
        width: probs.width,
        height: probs.height,
        prediction: plain.labels,
        uncertainty,
        smoothed: smoothed.labels,
        regions,
    });
    let mut cache = ws.jobs.layers.lock().expect("layer lock poisoned");
    cache.retain(|(n, _, _)| n != name);
    cache.push((name.to_string(), generation, layers.clone()));
    while cache.len() > KEEP_LAYERS {
        cache.remove(0);
    }
    Ok((layers, model, generation))
}

/// Which layers exist for the image, and its predicted area per class.
pub fn layers(ws: &Workspace, name: &str) -> Reply {
    let (l, model, generation) = match layers_of(ws, name) {
        Ok(v) => v,
        Err(r) => return r,
    };
    // Per-class area through the same table `grove apply` writes areas.csv with.
    let mut table = AreaTable::new(model.classes.names(), None);
    table.add_counts(
        name,
        &count_classes(&l.prediction, model.classes.len(), None),
    );
    let areas: Vec<Value> = table
        .rows()
        .into_iter()
        .filter(|r| r.image == name)
        .map(|r| json!({"class": r.class, "pixels": r.pixels, "fraction": r.fraction}))
        .collect();
    Reply::json(
        200,
        &json!({
            "name": name,
            "generation": generation,
            "width": l.width,
            "height": l.height,
            "layers": ["prediction", "smoothed", "uncertainty"],
            "areas": areas,
            "regions": l.regions,
        }),
    )
}

/// A layer as an RGBA PNG at image size (the page blends it with its own opacity).
pub fn layer_png(ws: &Workspace, name: &str, kind: &str) -> Reply {
    let (l, model, _) = match layers_of(ws, name) {
        Ok(v) => v,
        Err(r) => return r,
    };
    let rgba: Vec<u8> = match kind {
        "prediction.png" | "smoothed.png" => {
            let colours: Vec<[u8; 3]> = model.classes.classes().iter().map(|c| c.color).collect();
            let map = if kind == "smoothed.png" {
                &l.smoothed
            } else {
                &l.prediction
            };
            map.iter()
                .flat_map(|&c| {
                    let [r, g, b] = colours[c as usize];
                    [r, g, b, 255]
                })
                .collect()
        }
        // Unsure pixels glow magenta, sure ones are transparent.
        "uncertainty.png" => l
            .uncertainty
            .iter()
            .flat_map(|&u| [255, 0, 200, (u * 255.0).round() as u8])
            .collect(),
        _ => return Reply::error(404, "no such layer"),
    };
    Reply::new(
        200,
        "image/png",
        encode_png(l.width, l.height, png::ColorType::Rgba, None, &rgba),
    )
}

//! The fitted segmenter: class table + feature extractor (with its texton dictionary) +
//! forest + provenance. `TrainConfig::fit` builds it from a dataset; `predict_proba` turns
//! an image into per-pixel class probabilities. This is exactly what a model file holds.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use crate::dataset::sample::{balanced_sample, uniform_sample};
use crate::dataset::{ClassTable, Dataset, ImageEntry, UNLABELLED};
use crate::error::{GroveError, Result};
use crate::eval::drift::{FeatureMoments, TrainingProfile};
use crate::features::bank::filter_bank_names;
use crate::features::kmeans::KMeansConfig;
use crate::features::stack::{gather_rows, FeatureConfig, FeatureExtractor, Placement, Rect};
use crate::features::textons::TextonDictionary;
use crate::forest::{argmax, ForestConfig, RandomForest};
use crate::imageio::{read_image, RasterImage};
use crate::plane::Plane;
use crate::prediction::SmoothDefault;
use crate::progress::Progress;

/// Most labelled pixels sampled per training image (each is a row of all features).
pub const MAX_SAMPLES_PER_IMAGE: usize = 1_000_000;

/// Settings for training; validated by `fit`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainConfig {
    pub features: FeatureConfig,
    pub forest: ForestConfig,
    /// Labelled pixels drawn per training image, split equally among its classes.
    pub samples_per_image: usize,
    /// Drives pixel sampling, k-means and the forest (it replaces `forest.seed`), so one
    /// number reproduces a model.
    pub seed: u64,
    /// Keep filter responses of training images in memory between the two passes when
    /// they fit in this many bytes; otherwise recompute them (slower, bounded memory).
    pub cache_bytes: usize,
}

impl Default for TrainConfig {
    fn default() -> Self {
        TrainConfig {
            features: FeatureConfig::default(),
            forest: ForestConfig::default(),
            samples_per_image: 5000,
            seed: 0,
            cache_bytes: 2 << 30,
        }
    }
}

/// Where a model came from: enough to reproduce it or to notice it was trained on other data.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Provenance {
    pub grove_version: String,
    pub training_images: Vec<TrainingImage>,
    /// Sampled training pixels per class index.
    pub samples_per_class: Vec<u64>,
    /// Labelled pixels per class index over all training images.
    pub labelled_per_class: Vec<u64>,
    pub oob_accuracy: Option<f64>,
    pub seed: u64,
    pub created_unix: u64,
    pub config: TrainConfig,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct TrainingImage {
    pub name: String,
    /// SHA-256 of the image file's bytes, hex.
    pub image_sha256: String,
    pub labelled_pixels: u64,
}

/// A trained segmenter.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct Segmenter {
    pub classes: ClassTable,
    pub features: FeatureExtractor,
    pub forest: RandomForest,
    pub provenance: Provenance,
    /// The smoothing `apply` and `eval` use unless told otherwise (`grove train` chooses the
    /// strength; models of format version 1 have none).
    pub smoothing: SmoothDefault,
    /// What the training images looked like, for `apply`'s warnings about images unlike
    /// them (None in models of format version 1).
    pub profile: Option<TrainingProfile>,
}

/// Per-pixel class probabilities, pixel-major (`data[p * n_classes + c]`).
#[derive(Clone, Debug, PartialEq)]
pub struct Probabilities {
    pub width: usize,
    pub height: usize,
    pub n_classes: usize,
    pub data: Vec<f32>,
}

impl Probabilities {
    /// Most probable class index per pixel (ties go to the lower index).
    pub fn argmax(&self) -> Vec<u8> {
        self.data
            .chunks_exact(self.n_classes)
            .map(|p| argmax(p) as u8)
            .collect()
    }

    /// The winning probability per pixel: low values mark where the model is unsure.
    pub fn confidence(&self) -> Vec<f32> {
        self.data
            .chunks_exact(self.n_classes)
            .map(|p| p.iter().copied().fold(0.0, f32::max))
            .collect()
    }

    /// One class's probability as a plane.
    pub fn class_plane(&self, class: usize) -> Plane {
        let data = self
            .data
            .iter()
            .skip(class)
            .step_by(self.n_classes)
            .copied()
            .collect();
        Plane::from_vec(self.width, self.height, data)
    }
}

fn sha256_hex(path: &std::path::Path) -> Result<String> {
    let bytes = std::fs::read(path).map_err(|e| GroveError::io(path, e))?;
    Ok(crate::model::sha256_hex(&bytes))
}

impl TrainConfig {
    pub fn validate(&self) -> Result<()> {
        self.features.validate()?;
        self.forest.validate()?;
        if !(1..=MAX_SAMPLES_PER_IMAGE).contains(&self.samples_per_image) {
            return Err(GroveError::Config(format!(
                "samples per image = {} must be between 1 and {MAX_SAMPLES_PER_IMAGE}",
                self.samples_per_image
            )));
        }
        Ok(())
    }

    /// Trains on the labelled images `entries` of `dataset`.
    pub fn fit(
        &self,
        dataset: &Dataset,
        entries: &[&ImageEntry],
        progress: Progress,
    ) -> Result<Segmenter> {
        self.fit_keeping_rows(dataset, entries, progress)
            .map(|(model, _)| model)
    }

    /// [`TrainConfig::fit`], also handing back the sampled feature rows the forest learnt
    /// from, so that later steps on the same images (the smoothing-strength search) need not
    /// filter them again: features are most of a training run's time.
    pub fn fit_keeping_rows(
        &self,
        dataset: &Dataset,
        entries: &[&ImageEntry],
        progress: Progress,
    ) -> Result<(Segmenter, TrainingRows)> {
        self.validate()?;
        if entries.is_empty() {
            return Err(GroveError::Data(format!(
                "{}: no labelled images to train on (labels/NAME.png next to images/NAME.*)",
                dataset.root.display()
            )));
        }
        let n_classes = dataset.classes.len();
        let n_images = entries.len();

        // Pass 0, cheap (labels and image headers only), so a bad dataset fails before any
        // filtering: sizes, label values, class counts, colour mode, the forest's pixel sample.
        let bar = progress.stage("checking", n_images as u64);
        let mut labelled = vec![0u64; n_classes];
        let mut sampled = vec![0u64; n_classes];
        let mut training_images = Vec::with_capacity(n_images);
        let mut rngs = Vec::with_capacity(n_images);
        let mut forest_pixels: Vec<Vec<u32>> = Vec::with_capacity(n_images);
        let mut y: Vec<u32> = Vec::new();
        let mut any_colour = false;
        for (i, e) in entries.iter().enumerate() {
            let (header, lab) = dataset.load_labels_checked(e)?;
            any_colour |= !header.grey;
            let counts = lab.class_counts(n_classes);
            labelled.iter_mut().zip(&counts).for_each(|(a, b)| *a += b);
            training_images.push(TrainingImage {
                name: e
                    .image
                    .file_name()
                    .unwrap_or_default()
                    .to_string_lossy()
                    .into_owned(),
                image_sha256: sha256_hex(&e.image)?,
                labelled_pixels: counts.iter().sum(),
            });
            // One random stream per image: the samples do not depend on the order of work.
            let mut rng = ChaCha8Rng::seed_from_u64(self.seed);
            rng.set_stream(i as u64);
            let pixels = balanced_sample(&lab, n_classes, self.samples_per_image, &mut rng);
            for &p in &pixels {
                let c = lab.indices[p as usize];
                debug_assert_ne!(c, UNLABELLED);
                sampled[c as usize] += 1;
                y.push(c as u32);
            }
            forest_pixels.push(pixels);
            rngs.push(rng);
            bar.inc(1);
        }
        bar.finish_and_clear();
        for w in dataset.check_counts(&labelled)? {
            eprintln!("warning: {w}");
        }
        let channels = if any_colour { 3 } else { 1 };
        let mut extractor = FeatureExtractor {
            config: self.features.clone(),
            channels,
            textons: None,
        };
        let n_responses = filter_bank_names(channels, &self.features.bank).len();

        // Pass 1 (with textons): filter responses; pixels for k-means. Responses are kept for
        // pass 2 while they fit in `cache_bytes`; images are never all held at once.
        let mut cached: Vec<Option<Vec<Plane>>> = (0..n_images).map(|_| None).collect();
        if self.features.textons > 0 {
            let bar = progress.stage("filtering", n_images as u64);
            let mut cache_left = self.cache_bytes;
            let mut kmeans_rows: Vec<f32> = Vec::new();
            for (i, e) in entries.iter().enumerate() {
                let img = read_image(&e.image)?;
                let responses = extractor.responses(&img);
                let px = uniform_sample(
                    img.width * img.height,
                    self.features.texton_samples_per_image,
                    &mut rngs[i],
                );
                kmeans_rows.extend(gather_rows(&responses, &px));
                let bytes = img.width * img.height * 4 * n_responses;
                if bytes <= cache_left {
                    cache_left -= bytes;
                    cached[i] = Some(responses);
                }
                bar.inc(1);
            }
            bar.finish_and_clear();
            let km = KMeansConfig {
                k: self.features.textons,
                max_iter: self.features.kmeans_iterations,
                n_init: self.features.kmeans_restarts,
                seed: self.seed,
                ..KMeansConfig::default()
            };
            let n_rows = kmeans_rows.len() / n_responses;
            if n_rows < self.features.textons {
                return Err(GroveError::Data(format!(
                    "only {n_rows} pixels to build {} textons; use fewer textons or more images",
                    self.features.textons
                )));
            }
            extractor.textons = Some(TextonDictionary::fit(&kmeans_rows, n_responses, &km)?);
        }

        // Pass 2: full feature stacks, rows at the sampled pixels.
        let bar = progress.stage("features", n_images as u64);
        let n_features = extractor.n_features();
        let mut x: Vec<f32> = Vec::with_capacity(y.len() * n_features);
        let mut sizes = Vec::with_capacity(n_images);
        let mut moments = Vec::with_capacity(n_images);
        let mut per_image = Vec::with_capacity(n_images);
        for ((e, pixels), cache) in entries.iter().zip(&forest_pixels).zip(cached) {
            let responses = match cache {
                Some(r) => r,
                None => extractor.responses(&read_image(&e.image)?),
            };
            let stack = extractor.stack(responses);
            let first = x.len() / n_features;
            x.extend(stack.gather_rows(pixels));
            per_image.push(first..first + pixels.len());
            sizes.push((stack.width as u32, stack.height as u32));
            moments.push(stack_moments(&stack));
            bar.inc(1);
        }
        bar.finish_and_clear();

        let spinner = progress.spinner("forest");
        spinner.set_message(format!(
            "{} trees on {} pixels",
            self.forest.n_trees,
            y.len()
        ));
        let forest_config = ForestConfig {
            seed: self.seed,
            ..self.forest.clone()
        };
        let forest = RandomForest::fit(&forest_config, &x, n_features, &y, n_classes)?;
        spinner.finish_and_clear();
        let created_unix = creation_time();
        let model = Segmenter {
            classes: dataset.classes.clone(),
            provenance: Provenance {
                grove_version: env!("CARGO_PKG_VERSION").to_string(),
                training_images,
                samples_per_class: sampled,
                labelled_per_class: labelled,
                oob_accuracy: forest.oob_accuracy(),
                seed: self.seed,
                created_unix,
                config: self.clone(),
            },
            features: extractor,
            forest,
            smoothing: SmoothDefault::library(),
            profile: Some(TrainingProfile::from_images(sizes, &moments)),
        };
        let rows = TrainingRows {
            x,
            y,
            n_features,
            per_image,
        };
        Ok((model, rows))
    }
}

/// The sampled training pixels of a fit as feature rows: what [`TrainConfig::fit_keeping_rows`]
/// keeps besides the model.
#[derive(Clone, Debug)]
pub struct TrainingRows {
    /// Row-major, `y.len()` rows of `n_features` values.
    pub x: Vec<f32>,
    /// Class index of each row.
    pub y: Vec<u32>,
    pub n_features: usize,
    /// The rows of each training image (in the order of the `entries` given to the fit).
    pub per_image: Vec<std::ops::Range<usize>>,
}

/// The feature moments of a whole training image, taken as `predict_core` takes them.
fn stack_moments(stack: &crate::features::stack::FeatureStack) -> FeatureMoments {
    let f = stack.n_features();
    let n = stack.width * stack.height;
    let mut m = FeatureMoments::new(f);
    let mut buf = vec![0.0f32; BLOCK * f];
    for start in (0..n).step_by(BLOCK) {
        let rows = BLOCK.min(n - start);
        stack.rows_into(start, &mut buf[..rows * f]);
        m.add_rows(&buf[..rows * f], f, start);
    }
    m
}

/// Now, in Unix seconds, unless `SOURCE_DATE_EPOCH` is set (the reproducible-builds
/// convention), so that a model can be rebuilt byte for byte.
fn creation_time() -> u64 {
    std::env::var("SOURCE_DATE_EPOCH")
        .ok()
        .and_then(|v| v.trim().parse().ok())
        .unwrap_or_else(|| {
            std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map(|d| d.as_secs())
                .unwrap_or(0)
        })
}

/// Pixels per block when walking an image through the forest (the measured sweet spot
/// for keeping one block's rows and the trees' nodes in cache, see DESIGN notes).
const BLOCK: usize = 4096;

impl Segmenter {
    /// Per-pixel class probabilities for one image, computed in tiles of
    /// [`crate::tiling::DEFAULT_TILE`] so the feature stack of a large image never exists
    /// whole; bit-identical to any other tile size ([`crate::tiling::predict_tiled`]).
    pub fn predict_proba(&self, image: &RasterImage) -> Probabilities {
        crate::tiling::predict_tiled(self, image, crate::tiling::DEFAULT_TILE)
    }

    /// Class probabilities of the pixels `core` (in `window`'s coordinates) of `window`, the
    /// excerpt `at.window` of a larger image. Exact where `core` keeps
    /// [`FeatureExtractor::halo`] pixels from every window edge that is not an image edge.
    ///
    /// With `moments`, the core pixels' features are added to it on the way (for
    /// [`crate::eval::drift`]), at almost no cost.
    pub fn predict_core(
        &self,
        window: &RasterImage,
        at: &Placement,
        core: &Rect,
        moments: Option<&mut FeatureMoments>,
    ) -> Probabilities {
        self.walk_core(window, at, core, moments, |rows, out| {
            self.forest.predict_proba_into(rows, out)
        })
    }

    /// Per-pixel tree votes of a whole image (fraction of trees putting each class first; see
    /// `RandomForest::predict_votes_into`), in the layout of `predict_proba`. Untiled: it is
    /// for measuring the trees' disagreement, not for delivery.
    pub fn predict_votes(&self, image: &RasterImage) -> Probabilities {
        let (w, h) = (image.width, image.height);
        self.walk_core(
            image,
            &Placement::whole(w, h),
            &Rect::whole(w, h),
            None,
            |rows, out| self.forest.predict_votes_into(rows, out),
        )
    }

    /// Features of `window`, then `walk` over blocks of the rows of `core`'s pixels.
    fn walk_core<W>(
        &self,
        window: &RasterImage,
        at: &Placement,
        core: &Rect,
        moments: Option<&mut FeatureMoments>,
        walk: W,
    ) -> Probabilities
    where
        W: Fn(&[f32], &mut [f32]) + Sync,
    {
        let stack = self.features.features_at(window, at);
        let (f, k) = (stack.n_features(), self.classes.len());
        let want = moments.is_some();
        let mut data = vec![0.0f32; core.area() * k];
        // Per-block moments merged in block order, so the sums do not depend on threads.
        let blocks: Vec<Option<FeatureMoments>> = data
            .par_chunks_mut(BLOCK * k)
            .enumerate()
            .map(|(b, out)| {
                let rows = out.len() / k;
                let mut buf = vec![0.0f32; rows * f];
                stack.rect_rows_into(core, b * BLOCK, &mut buf);
                walk(&buf, out);
                want.then(|| {
                    let mut m = FeatureMoments::new(f);
                    m.add_rows(&buf, f, b * BLOCK);
                    m
                })
            })
            .collect();
        if let Some(total) = moments {
            blocks.iter().flatten().for_each(|m| total.merge(m));
        }
        Probabilities {
            width: core.width,
            height: core.height,
            n_classes: k,
            data,
        }
    }

    /// Consistency of the parts of a segmenter read from a file: the stages must agree on
    /// class and feature counts before any image is pushed through them.
    pub fn check(&self) -> std::result::Result<(), String> {
        self.forest.check()?;
        self.classes.validate()?;
        if self.forest.n_classes() != self.classes.len() {
            return Err("forest and class table disagree on the number of classes".into());
        }
        if !matches!(self.features.channels, 1 | 3) {
            return Err(format!(
                "invalid colour channel count {}",
                self.features.channels
            ));
        }
        self.features.config.validate().map_err(|e| e.to_string())?;
        let bank = crate::features::bank::filter_bank_names(
            self.features.channels,
            &self.features.config.bank,
        )
        .len();
        if let Some(t) = &self.features.textons {
            if t.dim() != bank || t.k() != self.features.config.textons {
                return Err("texton dictionary does not match the filter bank".into());
            }
        }
        if self.features.n_features() != self.forest.n_features() {
            return Err("forest and feature stack disagree on the number of features".into());
        }
        self.smoothing
            .settings()
            .validate()
            .map_err(|e| format!("smoothing default: {e}"))?;
        Ok(())
    }

    /// Feature names with the forest's impurity importances, most important first.
    pub fn ranked_importances(&self) -> Vec<(String, f64)> {
        let mut v: Vec<(String, f64)> = self
            .features
            .names()
            .into_iter()
            .zip(self.forest.feature_importances().iter().copied())
            .collect();
        v.sort_by(|a, b| b.1.total_cmp(&a.1));
        v
    }

    /// Rank (0 = most important) of the best position feature, if the model has them. A high
    /// rank is the usual sign that the model learnt where things sat in the training frames.
    pub fn position_rank(&self) -> Option<usize> {
        self.ranked_importances()
            .iter()
            .position(|(n, _)| crate::features::stack::POSITION_NAMES.contains(&n.as_str()))
    }
}

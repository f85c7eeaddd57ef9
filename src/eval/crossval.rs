//! K-fold cross-validation by image: each fold trains on the other folds' images and scores
//! its own, so no image has pixels on both sides. Pixels of one image look alike (same light,
//! same field, neighbouring pixels), so splitting pixels would score the model on near-copies
//! of what it learnt from; that is why the out-of-bag estimate is optimistic and this is not.
//!
//! Images are shuffled with the seed and dealt round-robin to `min(K, images)` folds (fewer
//! images than folds: leave-one-image-out). Folds run one after another, each training with all
//! threads, which keeps memory at one model's worth.

use rand::seq::SliceRandom;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::dataset::{Dataset, ImageEntry};
use crate::error::{GroveError, Result};
use crate::eval::score::{evaluate_smoothed, Scores};
use crate::imageio::RasterImage;
use crate::prediction::Prediction;
use crate::progress::Progress;
use crate::segmenter::{Segmenter, TrainConfig};
use crate::smooth::SmoothSettings;

/// Fewest folds: one fold is no cross-validation at all.
pub const MIN_FOLDS: usize = 2;

/// Mixed into the seed so fold assignment does not draw the same stream as pixel sampling.
const FOLD_STREAM: u64 = 0x6372_6f73_7376_616c; // "crossval"

/// Indices `0..n_images` split into `min(k, n_images)` folds, each sorted, together a
/// partition; the same `seed` gives the same folds. Errors: `k < 2`, fewer than 2 images.
pub fn assign_folds(n_images: usize, k: usize, seed: u64) -> Result<Vec<Vec<usize>>> {
    if k < MIN_FOLDS {
        return Err(GroveError::Config(format!(
            "--folds {k}: cross-validation needs at least {MIN_FOLDS} folds"
        )));
    }
    if n_images < 2 {
        return Err(GroveError::Config(format!(
            "cross-validation by image needs at least 2 labelled images, found {n_images}"
        )));
    }
    let n_folds = k.min(n_images);
    let mut order: Vec<usize> = (0..n_images).collect();
    order.shuffle(&mut ChaCha8Rng::seed_from_u64(seed ^ FOLD_STREAM));
    let mut folds = vec![Vec::new(); n_folds];
    for (i, &image) in order.iter().enumerate() {
        folds[i % n_folds].push(image);
    }
    folds.iter_mut().for_each(|f| f.sort_unstable());
    Ok(folds)
}

/// One fold: which images it held out, how they scored, and what its model said of itself.
#[derive(Clone, Debug)]
pub struct FoldResult {
    /// Stems of the held-out images.
    pub held_out: Vec<String>,
    pub training_images: usize,
    pub scores: Scores,
    pub oob_accuracy: Option<f64>,
    /// The fold model's feature importances, most important first.
    pub importances: Vec<(String, f64)>,
}

/// All folds, and their held-out predictions pooled (each image scored once, by the model
/// that did not see it).
#[derive(Clone, Debug)]
pub struct CrossValidation {
    pub folds: Vec<FoldResult>,
    pub pooled: Scores,
    pub seed: u64,
    /// Fewer images than requested folds: each fold holds out one image.
    pub leave_one_image_out: bool,
    /// The smoothing of the scored maps.
    pub smoothing: SmoothSettings,
}

impl CrossValidation {
    /// Mean out-of-bag accuracy of the fold models (for showing beside the held-out score).
    pub fn mean_oob(&self) -> Option<f64> {
        let v: Vec<f64> = self.folds.iter().filter_map(|f| f.oob_accuracy).collect();
        (!v.is_empty()).then(|| v.iter().sum::<f64>() / v.len() as f64)
    }

    /// Feature importances averaged over the fold models, most important first.
    pub fn mean_importances(&self) -> Vec<(String, f64)> {
        let mut sum: Vec<(String, f64)> = Vec::new();
        for f in &self.folds {
            for (name, v) in &f.importances {
                match sum.iter_mut().find(|(n, _)| n == name) {
                    Some((_, s)) => *s += v,
                    None => sum.push((name.clone(), *v)),
                }
            }
        }
        let n = self.folds.len().max(1) as f64;
        sum.iter_mut().for_each(|(_, s)| *s /= n);
        sum.sort_by(|a, b| b.1.total_cmp(&a.1));
        sum
    }
}

/// Cross-validates `config` on the labelled images `entries` of `dataset` with `k` folds
/// (seeded by `config.seed`), predicting in tiles of `tile`. `visit` sees every held-out
/// prediction (with the fold's model), e.g. to draw report thumbnails.
#[allow(clippy::too_many_arguments)] // each is a distinct choice of the caller
pub fn cross_validate<F>(
    config: &TrainConfig,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    k: usize,
    tile: usize,
    smoothing: &SmoothSettings,
    progress: Progress,
    mut visit: F,
) -> Result<CrossValidation>
where
    F: FnMut(&Segmenter, &ImageEntry, &RasterImage, &Prediction) -> Result<()>,
{
    config.validate()?;
    let folds = assign_folds(entries.len(), k, config.seed)?;
    let mut results = Vec::with_capacity(folds.len());
    let mut pooled = Scores::new(dataset.classes.len());
    for fold in &folds {
        let (test, train): (Vec<_>, Vec<_>) = entries
            .iter()
            .enumerate()
            .partition(|(i, _)| fold.contains(i));
        let train: Vec<&ImageEntry> = train.into_iter().map(|(_, e)| *e).collect();
        let test: Vec<&ImageEntry> = test.into_iter().map(|(_, e)| *e).collect();
        let model = config.fit(dataset, &train, progress)?;
        let settings = std::slice::from_ref(smoothing);
        let scores = evaluate_smoothed(
            &model,
            dataset,
            &test,
            tile,
            settings,
            progress,
            |e, img, p| visit(&model, e, img, &p[0]),
        )?
        .remove(0);
        pooled.merge(&scores)?;
        results.push(FoldResult {
            held_out: test.iter().map(|e| e.stem.clone()).collect(),
            training_images: train.len(),
            scores,
            oob_accuracy: model.provenance.oob_accuracy,
            importances: model.ranked_importances(),
        });
    }
    // Pooled per-image scores in dataset order, not fold order.
    let position = |name: &str| entries.iter().position(|e| e.stem == name);
    pooled.per_image.sort_by_key(|i| position(&i.name));
    Ok(CrossValidation {
        leave_one_image_out: entries.len() <= k,
        folds: results,
        pooled,
        seed: config.seed,
        smoothing: smoothing.clone(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn folds_partition_the_images_and_follow_the_seed() {
        for (n, k) in [(10, 3), (7, 7), (3, 5), (2, 2), (25, 4)] {
            let folds = assign_folds(n, k, 11).unwrap();
            assert_eq!(folds.len(), k.min(n));
            let mut all: Vec<usize> = folds.concat();
            all.sort_unstable();
            assert_eq!(all, (0..n).collect::<Vec<_>>(), "{n} images, {k} folds");
            let sizes: Vec<usize> = folds.iter().map(Vec::len).collect();
            assert!(sizes.iter().max().unwrap() - sizes.iter().min().unwrap() <= 1);
            assert_eq!(folds, assign_folds(n, k, 11).unwrap());
        }
        assert_ne!(
            assign_folds(12, 3, 1).unwrap(),
            assign_folds(12, 3, 2).unwrap()
        );
        assert!(assign_folds(1, 2, 0).is_err());
        assert!(assign_folds(5, 1, 0).is_err());
    }
}

//! Choosing a model's smoothing strength on its own training images: a few of them are held
//! out, a cheap forest is trained on the sampled feature rows of the rest (those of the main
//! fit, so nothing is filtered twice), and its maps of the held-out images are scored at each
//! strength of a small grid. Scoring on images the forest has not seen matters: on
//! its own training images the forest is over-confident and sure pixels need no smoothing.
//!
//! The cheap forest (fewer trees, fewer samples) is less sure than the final model, so the
//! chosen strength leans a little high; the grid is coarse enough for that not to matter
//! (on the demo, mean IoU varies by under a point between strengths 2 and 8).

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;

use crate::dataset::{Dataset, ImageEntry};
use crate::error::Result;
use crate::eval::score::evaluate_smoothed;
use crate::forest::{ForestConfig, RandomForest};
use crate::prediction::SmoothDefault;
use crate::progress::Progress;
use crate::segmenter::{Segmenter, TrainingRows};
use crate::smooth::{SmoothMethod, SmoothSettings};
use crate::tiling::DEFAULT_TILE;

/// Strengths tried (0 = no smoothing), spanning where the demo's optimum and the
/// mni152 slices' lie.
pub const STRENGTH_GRID: [f32; 6] = [0.0, 1.0, 2.0, 3.0, 5.0, 8.0];
/// Trees of the cheap forest.
pub const SEARCH_TREES: usize = 12;
/// Labelled pixels sampled per image for the cheap forest.
pub const SEARCH_SAMPLES_PER_IMAGE: usize = 2000;
/// At most this many images are held out (more cost time and change little).
pub const MAX_HELD_OUT: usize = 4;
/// Mean IoUs closer than this (0.1 point) count as tied; boundary F1 then decides, then the
/// smaller strength.
pub const MEAN_IOU_TIE: f64 = 0.001;

/// The held-out scores at one strength.
#[derive(Clone, Debug, PartialEq)]
pub struct StrengthScore {
    pub strength: f32,
    pub mean_iou: f64,
    pub boundary_f1: Option<f64>,
}

/// What the search found.
#[derive(Clone, Debug)]
pub struct StrengthChoice {
    pub method: SmoothMethod,
    pub strength: f32,
    /// One per grid strength, in grid order.
    pub scores: Vec<StrengthScore>,
    /// Stems of the held-out images.
    pub held_out: Vec<String>,
    /// Images the cheap forest was trained on.
    pub trained_on: usize,
    /// The held-out labels are scribbles (see `score::SPARSE_LABELS`): only labelled strokes
    /// were scored.
    pub scribbles: bool,
    pub seconds: f64,
}

impl StrengthChoice {
    /// The model default this choice gives.
    pub fn default(&self) -> SmoothDefault {
        if self.strength == 0.0 {
            SmoothDefault::NONE
        } else {
            SmoothDefault {
                method: self.method,
                strength: self.strength,
            }
        }
    }

    /// The scores per strength on one line: "0 0.9210/0.8312, 1 …" (mean IoU / boundary F1).
    pub fn scores_line(&self) -> String {
        self.scores
            .iter()
            .map(|s| {
                format!(
                    "{} {:.4}/{}",
                    s.strength,
                    s.mean_iou,
                    s.boundary_f1.map_or("-".into(), |b| format!("{b:.4}"))
                )
            })
            .collect::<Vec<_>>()
            .join(", ")
    }
}

/// The images held out of `n`: evenly spread over the list (names often group by date or
/// site, so neighbours are alike), `n / 4` of them, 1 to [`MAX_HELD_OUT`].
pub fn held_out_indices(n: usize) -> Vec<usize> {
    let h = (n / 4).clamp(1, MAX_HELD_OUT);
    (0..h).map(|j| (2 * j + 1) * n / (2 * h)).collect()
}

/// Picks the best of `scores`: highest mean IoU, ties within [`MEAN_IOU_TIE`] broken by
/// boundary F1, then by the smaller strength.
pub fn pick(scores: &[StrengthScore]) -> &StrengthScore {
    let best = scores
        .iter()
        .map(|s| s.mean_iou)
        .fold(f64::NEG_INFINITY, f64::max);
    scores
        .iter()
        .filter(|s| s.mean_iou >= best - MEAN_IOU_TIE)
        .min_by(|a, b| {
            let (fa, fb) = (a.boundary_f1.unwrap_or(-1.0), b.boundary_f1.unwrap_or(-1.0));
            fb.total_cmp(&fa).then(a.strength.total_cmp(&b.strength))
        })
        .expect("the best score is among the scores")
}

/// Runs the search for `method` over [`STRENGTH_GRID`] with the features of a finished fit:
/// `model` and `rows` from [`TrainConfig::fit_keeping_rows`] on `entries`. The cheap forest
/// learns from up to [`SEARCH_SAMPLES_PER_IMAGE`] of the kept rows of each image not held
/// out, so no training image is filtered twice. The texton dictionary is the model's, which
/// saw the held-out images too; it is fitted without labels, so no label leaks. None when
/// there are fewer than two images.
pub fn choose_strength_reusing(
    model: &Segmenter,
    rows: &TrainingRows,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    method: SmoothMethod,
    progress: Progress,
) -> Result<Option<StrengthChoice>> {
    if entries.len() < 2 {
        return Ok(None);
    }
    let t0 = std::time::Instant::now();
    let held = held_out_indices(entries.len());
    let test: Vec<&ImageEntry> = held.iter().map(|&i| entries[i]).collect();
    let config = &model.provenance.config;
    let (x, y) = search_rows(rows, &held, config.seed);
    let forest_config = ForestConfig {
        n_trees: config.forest.n_trees.min(SEARCH_TREES),
        seed: config.seed,
        ..config.forest.clone()
    };
    let forest = RandomForest::fit(&forest_config, &x, rows.n_features, &y, model.classes.len())?;
    let cheap = Segmenter {
        classes: model.classes.clone(),
        features: model.features.clone(),
        forest,
        provenance: model.provenance.clone(),
        smoothing: SmoothDefault::NONE,
        profile: None,
    };
    let settings: Vec<SmoothSettings> = STRENGTH_GRID
        .iter()
        .map(|&strength| {
            SmoothDefault {
                method: if strength == 0.0 {
                    SmoothMethod::None
                } else {
                    method
                },
                strength,
            }
            .settings()
        })
        .collect();
    let scores = evaluate_smoothed(
        &cheap,
        dataset,
        &test,
        DEFAULT_TILE,
        &settings,
        progress,
        |_, _, _| Ok(()),
    )?;
    let scribbles = scores[0].sparse_labels();
    let scores: Vec<StrengthScore> = STRENGTH_GRID
        .iter()
        .zip(&scores)
        .map(|(&strength, s)| StrengthScore {
            strength,
            mean_iou: s.mean_iou().unwrap_or(0.0),
            boundary_f1: s.boundary_f1(),
        })
        .collect();
    let strength = pick(&scores).strength;
    Ok(Some(StrengthChoice {
        method,
        strength,
        scores,
        held_out: test.iter().map(|e| e.stem.clone()).collect(),
        trained_on: entries.len() - held.len(),
        scribbles,
        seconds: t0.elapsed().as_secs_f64(),
    }))
}

/// The cheap forest's rows: up to [`SEARCH_SAMPLES_PER_IMAGE`] drawn at random (one stream per
/// image, so the draw does not depend on the others) from each image not in `held`.
fn search_rows(rows: &TrainingRows, held: &[usize], seed: u64) -> (Vec<f32>, Vec<u32>) {
    let f = rows.n_features;
    let (mut x, mut y) = (Vec::new(), Vec::new());
    for (i, range) in rows.per_image.iter().enumerate() {
        if held.contains(&i) {
            continue;
        }
        let mut rng = ChaCha8Rng::seed_from_u64(seed ^ SEARCH_STREAM_SALT);
        rng.set_stream(i as u64);
        let n = range.len();
        let mut picked: Vec<usize> = if n <= SEARCH_SAMPLES_PER_IMAGE {
            (0..n).collect()
        } else {
            rand::seq::index::sample(&mut rng, n, SEARCH_SAMPLES_PER_IMAGE).into_vec()
        };
        picked.sort_unstable();
        for r in picked.into_iter().map(|j| range.start + j) {
            x.extend_from_slice(&rows.x[r * f..(r + 1) * f]);
            y.push(rows.y[r]);
        }
    }
    (x, y)
}

/// Keeps the search's row draw apart from the fit's pixel draws of the same seed.
const SEARCH_STREAM_SALT: u64 = 0x5eed_5ea2_c4ed_0001;

#[cfg(test)]
mod tests {
    use super::*;

    fn s(strength: f32, mean_iou: f64, boundary_f1: Option<f64>) -> StrengthScore {
        StrengthScore {
            strength,
            mean_iou,
            boundary_f1,
        }
    }

    #[test]
    fn held_out_images_are_spread_and_never_all() {
        assert_eq!(held_out_indices(2), vec![1]);
        assert_eq!(held_out_indices(5), vec![2]);
        assert_eq!(held_out_indices(14), vec![2, 7, 11]);
        assert_eq!(held_out_indices(100), vec![12, 37, 62, 87]);
        for n in 2..50 {
            let h = held_out_indices(n);
            assert!(h.len() < n && h.windows(2).all(|w| w[0] < w[1]) && h[h.len() - 1] < n);
        }
    }

    #[test]
    fn best_mean_iou_wins_and_near_ties_go_to_boundary_f1_then_the_smaller_strength() {
        let scores = [s(0.0, 0.90, Some(0.80)), s(2.0, 0.95, Some(0.85))];
        assert_eq!(pick(&scores).strength, 2.0);
        let scores = [
            s(1.0, 0.9500, Some(0.86)),
            s(3.0, 0.9505, Some(0.90)),
            s(5.0, 0.9508, Some(0.88)),
        ];
        assert_eq!(pick(&scores).strength, 3.0);
        let scores = [s(2.0, 0.95, None), s(3.0, 0.95, None)];
        assert_eq!(pick(&scores).strength, 2.0);
    }
}

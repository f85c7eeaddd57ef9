//! Training a model as `grove train` does, for every caller (the CLI and the workspace page):
//! the fit, then the model's default smoothing, as given or chosen on held-out training
//! images, with the sentence that says why. One function, so the page's model is the
//! command's model and states its choice in the same words.

use crate::dataset::{Dataset, ImageEntry};
use crate::error::Result;
use crate::eval::smoothing_strength::{choose_strength_reusing, StrengthChoice, SEARCH_TREES};
use crate::prediction::SmoothDefault;
use crate::progress::Progress;
use crate::segmenter::{Segmenter, TrainConfig};
use crate::smooth::SmoothMethod;

/// How the model's default smoothing is set: `method` None = alpha-expansion; `strength`
/// None = searched (see `eval::smoothing_strength`).
#[derive(Clone, Copy, Debug, Default)]
pub struct SmoothingRequest {
    pub method: Option<SmoothMethod>,
    pub strength: Option<f32>,
}

/// A trained model and how its smoothing default came about.
pub struct Trained {
    pub model: Segmenter,
    /// The search's result, when it ran and succeeded.
    pub choice: Option<StrengthChoice>,
    /// Why the search failed, when it ran and failed (the built-in default is then used).
    pub search_failed: Option<String>,
    /// Whether the default was given rather than searched for.
    pub given: bool,
    /// Training images.
    pub images: usize,
    pub seconds: f64,
}

/// Fits `config` on `entries`, then sets the smoothing default as `smoothing` asks.
pub fn train(
    config: &TrainConfig,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    smoothing: SmoothingRequest,
    progress: Progress,
) -> Result<Trained> {
    let t0 = std::time::Instant::now();
    // The real model first: its checks of the dataset give the clearest messages, and the
    // strength search below trains on a subset that may fail for reasons of its own. It
    // reuses the fit's feature rows.
    let (mut model, rows) = config.fit_keeping_rows(dataset, entries, progress)?;
    let method = smoothing.method.unwrap_or(SmoothMethod::Expansion);
    let (mut choice, mut search_failed) = (None, None);
    let given = smoothing.method == Some(SmoothMethod::None) || smoothing.strength.is_some();
    model.smoothing = match (smoothing.method, smoothing.strength) {
        (Some(SmoothMethod::None), _) => SmoothDefault::NONE,
        (_, Some(strength)) => SmoothDefault { method, strength },
        _ => match choose_strength_reusing(&model, &rows, dataset, entries, method, progress) {
            Ok(Some(c)) => {
                let d = c.default();
                choice = Some(c);
                d
            }
            Ok(None) => SmoothDefault::library(),
            Err(e) => {
                search_failed = Some(e.to_string());
                SmoothDefault::library()
            }
        },
    };
    drop(rows);
    Ok(Trained {
        model,
        choice,
        search_failed,
        given,
        images: entries.len(),
        seconds: t0.elapsed().as_secs_f64(),
    })
}

impl Trained {
    /// Whether the strength was searched (so `grove train --smooth-strength W` would have
    /// saved that time: the train command says so; the demo and the page have no such option).
    pub fn strength_searched(&self) -> bool {
        self.choice.is_some()
    }

    /// "expansion, strength 3 (best held-out mean IoU …)": the default and why, on one or two
    /// lines, as `grove train` prints it and the page shows it.
    pub fn smoothing_statement(&self) -> String {
        let why = match (&self.choice, &self.search_failed) {
            (Some(c), _) => explain_choice(c, self.seconds),
            _ if self.given => "as given)".to_string(),
            (None, None) if self.images < 2 => "the built-in default: with one training image there is none to hold out for choosing the strength)".to_string(),
            (None, Some(e)) => format!("the built-in default: the strength search on held-out training images did not run: {e})"),
            (None, None) => "the built-in default)".to_string(),
        };
        format!("{} ({why}", self.model.smoothing.describe())
    }
}

/// Why the search chose what it chose, with its scores and its share of the time.
fn explain_choice(c: &StrengthChoice, total_seconds: f64) -> String {
    format!(
        "best held-out mean IoU, tie-break boundary F1, of a {SEARCH_TREES}-tree forest trained on {} images and scored on {} ({}){}; {:.1} s, {:.0} % of training)\n  strength mean IoU/boundary F1: {}",
        c.trained_on,
        c.held_out.len(),
        c.held_out.join(", "),
        if c.scribbles {
            ", scored on the labelled strokes only (scribble labels)"
        } else {
            ""
        },
        c.seconds,
        100.0 * c.seconds / total_seconds.max(1e-9),
        c.scores_line()
    )
}

//! Suggestions for image files, the one path from a file to its [`ImageSuggestion`] that
//! `grove suggest` and the workspace's image ranking both take, so the page's ranks are the
//! command's: the image read, predicted by the model, its labelled pixels excluded.

use std::path::{Path, PathBuf};

use crate::dataset::{read_labels_for, stem_of, LabelOptions, UNLABELLED};
use crate::error::Result;
use crate::eval::suggest::{suggest_image, ImageSuggestion, SuggestConfig};
use crate::imageio::{read_image, RasterImage};
use crate::segmenter::{Probabilities, Segmenter};

/// The label file of `image`: `labels/STEM.png` in `labels` when given, else
/// `../labels/STEM.png` beside a dataset's images/ folder; None when there is none.
pub fn label_file_of(image: &Path, labels: Option<&Path>) -> Option<PathBuf> {
    let stem = stem_of(image);
    let candidate = match labels {
        Some(dir) => dir.join(format!("{stem}.png")),
        None => {
            let dir = image.parent()?;
            if dir.file_name()? != "images" {
                return None;
            }
            dir.parent()?.join("labels").join(format!("{stem}.png"))
        }
    };
    candidate.is_file().then_some(candidate)
}

/// The pixels `label_file` labels (never suggested), for an image of `size`.
pub fn known_pixels(
    label_file: &Path,
    model: &Segmenter,
    opts: &LabelOptions,
    size: (usize, usize),
) -> Result<Vec<bool>> {
    let map = read_labels_for(label_file, &model.classes, opts, size)?;
    Ok(map.indices.iter().map(|&c| c != UNLABELLED).collect())
}

/// A suggestion with what it was computed from (the caller may draw it).
pub struct FileSuggestion {
    pub suggestion: ImageSuggestion,
    pub image: RasterImage,
    pub probabilities: Probabilities,
    /// Whether a label file was found (its pixels are then not suggested).
    pub labelled: bool,
}

/// Reads `path`, predicts it, and suggests regions outside the pixels of its label file
/// (found by [`label_file_of`] with `labels`).
pub fn suggest_file(
    model: &Segmenter,
    path: &Path,
    labels: Option<&Path>,
    opts: &LabelOptions,
    cfg: &SuggestConfig,
) -> Result<FileSuggestion> {
    let image = read_image(path)?;
    let known = label_file_of(path, labels)
        .map(|lf| known_pixels(&lf, model, opts, (image.width, image.height)))
        .transpose()?;
    let probabilities = model.predict_proba(&image);
    let suggestion = suggest_image(
        &stem_of(path),
        &probabilities,
        known.as_deref(),
        &model.classes.names(),
        cfg,
    );
    Ok(FileSuggestion {
        suggestion,
        image,
        probabilities,
        labelled: known.is_some(),
    })
}

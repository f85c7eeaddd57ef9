//! `--report FILE.html` of `eval` and `crossval`: one self-contained HTML file (styles and
//! charts inline, pictures as `data:` URIs, no scripts, nothing fetched) that a user can mail
//! or archive next to the model.
//!
//! [`Report`] gathers what the page shows; `html` lays it out; `svg` draws the charts;
//! `thumbnails` makes the per-image pictures; `colormap` is the colour-blind-safe scale.

pub mod colormap;
pub mod data_uri;
pub mod html;
pub mod svg;
pub mod thumbnails;

use std::path::Path;

use crate::dataset::{ClassTable, Dataset, ImageEntry};
use crate::error::Result;
use crate::eval::crossval::CrossValidation;
use crate::eval::crossval_report::CrossvalReport;
use crate::eval::score::MetricsReport;
use crate::imageio::RasterImage;
use crate::prediction::Prediction;
use crate::segmenter::Segmenter;
pub use thumbnails::ThumbnailRow;

/// Most images given a row of thumbnails (each row is ~5 small PNGs); the scores table still
/// lists every image.
pub const MAX_THUMBNAIL_ROWS: usize = 60;

/// The out-of-bag caveat, said the same way everywhere.
pub const OOB_CAVEAT: &str = "Out-of-bag accuracy is measured on sampled pixels of the training images themselves. Pixels of one image look alike, so it is optimistic; the held-out scores on this page are the ones to trust.";

/// Everything a report page shows.
#[derive(Clone, Debug)]
pub struct Report {
    /// "Held-out scores" or "Cross-validation by image".
    pub title: String,
    /// (what, value) lines under the title: model, data, settings.
    pub facts: Vec<(String, String)>,
    pub scores: MetricsReport,
    pub crossval: Option<CrossvalReport>,
    /// Class names and colours, in class order.
    pub classes: Vec<(String, [u8; 3])>,
    /// Feature importances, most important first.
    pub importances: Vec<(String, f64)>,
    /// Out-of-bag accuracy (the model's, or the mean of the fold models').
    pub oob_accuracy: Option<f64>,
    pub thumbnails: Thumbnails,
}

impl Report {
    pub fn new(title: &str, scores: MetricsReport, classes: &ClassTable) -> Self {
        Report {
            title: title.into(),
            facts: Vec::new(),
            scores,
            crossval: None,
            classes: classes
                .classes()
                .iter()
                .map(|c| (c.name.clone(), c.color))
                .collect(),
            importances: Vec::new(),
            oob_accuracy: None,
            thumbnails: Thumbnails::default(),
        }
    }

    /// The page of `eval`: `model` scored on held-out images (`scores`).
    pub fn for_eval(model: &Segmenter, scores: MetricsReport, thumbnails: Thumbnails) -> Self {
        let mut r = Report::new("Held-out scores", scores, &model.classes);
        let p = &model.provenance;
        r.facts.push((
            "model".into(),
            format!(
                "{} training images, {} trees, {} features, seed {}",
                p.training_images.len(),
                p.config.forest.n_trees,
                model.features.n_features(),
                p.seed
            ),
        ));
        r.importances = model.ranked_importances();
        r.oob_accuracy = p.oob_accuracy;
        r.thumbnails = thumbnails;
        r
    }

    /// The page of `crossval`.
    pub fn for_crossval(
        cv: &CrossValidation,
        report: CrossvalReport,
        classes: &ClassTable,
        thumbnails: Thumbnails,
    ) -> Self {
        let mut r = Report::new("Cross-validation by image", report.pooled.clone(), classes);
        r.facts.push((
            "folds".into(),
            format!(
                "{} by image{}, seed {}",
                report.n_folds,
                if report.leave_one_image_out {
                    " (leave-one-image-out)"
                } else {
                    ""
                },
                report.seed
            ),
        ));
        r.importances = cv.mean_importances();
        r.oob_accuracy = cv.mean_oob();
        r.crossval = Some(report);
        r.thumbnails = thumbnails;
        r
    }

    pub fn to_html(&self) -> String {
        html::page(self)
    }

    /// Writes the page atomically; the caller has checked `path` with the output guard.
    pub fn write(&self, path: &Path) -> Result<()> {
        crate::imageio::write_atomic(path, self.to_html().as_bytes())
    }
}

/// Thumbnail rows collected while images are scored (the first [`MAX_THUMBNAIL_ROWS`]).
#[derive(Clone, Debug, Default)]
pub struct Thumbnails {
    pub rows: Vec<ThumbnailRow>,
    /// Scored images beyond the limit, without pictures.
    pub omitted: usize,
}

impl Thumbnails {
    /// Adds the pictures of one scored image (its labels are read again: cheap next to
    /// predicting it, and the scorer does not hand them out).
    pub fn add(
        &mut self,
        dataset: &Dataset,
        entry: &ImageEntry,
        image: &RasterImage,
        prediction: &Prediction,
    ) -> Result<()> {
        if self.rows.len() >= MAX_THUMBNAIL_ROWS {
            self.omitted += 1;
            return Ok(());
        }
        let Some(labels) = &entry.labels else {
            return Ok(());
        };
        let truth = dataset.read_labels(labels)?;
        self.rows.push(ThumbnailRow::new(
            &entry.stem,
            image,
            &truth.indices,
            prediction,
            &dataset.classes,
        ));
        Ok(())
    }
}

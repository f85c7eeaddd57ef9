//! Scoring a segmenter on labelled images and reporting the figures.

use serde::Serialize;

use crate::dataset::{ClassTable, Dataset, ImageEntry, UNLABELLED};
use crate::error::{GroveError, Result};
use crate::eval::confusion::ConfusionMatrix;
use crate::imageio::RasterImage;
use crate::progress::Progress;
use crate::segmenter::{Probabilities, Segmenter};
use crate::tiling::{predict_tiled, DEFAULT_TILE};

/// The scores as written by `--json` and by the demo's `metrics.json`.
#[derive(Clone, Debug, Serialize)]
pub struct MetricsReport {
    /// "written by grove VERSION": marks the file as grove's own (see `output_guard`).
    pub generator: String,
    pub pixel_accuracy: f64,
    pub mean_iou: f64,
    pub mean_class_accuracy: f64,
    /// Class name → IoU (null when the class is absent from truth and prediction).
    pub per_class_iou: serde_json::Map<String, serde_json::Value>,
    /// Class name → accuracy (recall; null when absent from truth).
    pub per_class_accuracy: serde_json::Map<String, serde_json::Value>,
    /// Rows truth, columns prediction, in `classes` order.
    pub confusion: Vec<Vec<u64>>,
    pub classes: Vec<String>,
    pub labelled_pixels: u64,
    pub images: Vec<String>,
}

impl MetricsReport {
    pub fn new(cm: &ConfusionMatrix, classes: &ClassTable, images: Vec<String>) -> Self {
        let names = classes.names();
        let by_name = |v: Vec<Option<f64>>| {
            names
                .iter()
                .zip(v)
                .map(|(n, x)| {
                    (
                        n.clone(),
                        x.map_or(serde_json::Value::Null, serde_json::Value::from),
                    )
                })
                .collect()
        };
        let k = classes.len();
        MetricsReport {
            generator: format!(
                "{} {}",
                crate::output_guard::SIGNATURE,
                env!("CARGO_PKG_VERSION")
            ),
            pixel_accuracy: cm.pixel_accuracy().unwrap_or(0.0),
            mean_iou: cm.mean_iou().unwrap_or(0.0),
            mean_class_accuracy: cm.mean_class_accuracy().unwrap_or(0.0),
            per_class_iou: by_name(cm.per_class_iou()),
            per_class_accuracy: by_name(cm.per_class_accuracy()),
            confusion: (0..k)
                .map(|t| (0..k).map(|p| cm.get(t, p)).collect())
                .collect(),
            classes: names,
            labelled_pixels: cm.total(),
            images,
        }
    }

    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("metrics serialise") + "\n"
    }

    /// A plain-text table for the terminal.
    pub fn to_table(&self) -> String {
        let width = self
            .classes
            .iter()
            .map(|c| c.len())
            .max()
            .unwrap_or(5)
            .max(5);
        let fmt = |v: &serde_json::Value| {
            v.as_f64()
                .map_or("   -  ".to_string(), |x| format!("{x:6.4}"))
        };
        let mut s = format!(
            "{} images, {} labelled pixels\npixel accuracy {:.4}   mean IoU {:.4}   mean class accuracy {:.4}\n\n",
            self.images.len(),
            self.labelled_pixels,
            self.pixel_accuracy,
            self.mean_iou,
            self.mean_class_accuracy
        );
        s += &format!("{:<width$}  {:>6}  {:>8}\n", "class", "IoU", "accuracy");
        for name in &self.classes {
            s += &format!(
                "{:<width$}  {}  {:>8}\n",
                name,
                fmt(&self.per_class_iou[name]),
                fmt(&self.per_class_accuracy[name])
            );
        }
        let cell = self
            .confusion
            .iter()
            .flatten()
            .map(|v| v.to_string().len())
            .max()
            .unwrap_or(1)
            .max(width.min(10));
        s += "\nconfusion matrix (rows: truth, columns: prediction)\n";
        s += &format!("{:<width$}", "");
        for name in &self.classes {
            let short: String = name.chars().take(cell).collect();
            s += &format!("  {short:>cell$}");
        }
        s += "\n";
        for (name, row) in self.classes.iter().zip(&self.confusion) {
            s += &format!("{name:<width$}");
            for v in row {
                s += &format!("  {v:>cell$}");
            }
            s += "\n";
        }
        if let Some((t, p, n)) = self.worst_confusion() {
            s += &format!(
                "\nmost frequent error: {} taken for {} ({n} px, {:.1} % of {} pixels); more labels where they meet help most\n",
                self.classes[t],
                self.classes[p],
                100.0 * n as f64 / self.confusion[t].iter().sum::<u64>() as f64,
                self.classes[t]
            );
        }
        s
    }

    /// The largest off-diagonal cell: (truth, prediction, count), if there is any error.
    pub fn worst_confusion(&self) -> Option<(usize, usize, u64)> {
        let cells = self
            .confusion
            .iter()
            .enumerate()
            .flat_map(|(t, row)| row.iter().enumerate().map(move |(p, &n)| (t, p, n)));
        // Ties go to the first cell in row order (max_by_key keeps the last, hence `rev`).
        let cells: Vec<_> = cells.filter(|&(t, p, n)| t != p && n > 0).collect();
        cells.into_iter().rev().max_by_key(|&(_, _, n)| n)
    }
}

/// Predicts every labelled image in `entries` and accumulates the confusion matrix.
pub fn evaluate(
    model: &Segmenter,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    progress: Progress,
) -> Result<ConfusionMatrix> {
    evaluate_with(model, dataset, entries, progress, |_, _, _| Ok(()))
}

/// As [`evaluate`], handing each prediction to `visit` (e.g. to write outputs) so an image
/// that is both scored and delivered is predicted once.
pub fn evaluate_with<F>(
    model: &Segmenter,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    progress: Progress,
    visit: F,
) -> Result<ConfusionMatrix>
where
    F: FnMut(&ImageEntry, &RasterImage, &Probabilities) -> Result<()>,
{
    evaluate_tiled(model, dataset, entries, DEFAULT_TILE, progress, visit)
}

/// As [`evaluate_with`], predicting in tiles of `tile` pixels (0 = whole images); the scores
/// do not depend on it (tiled prediction is bit-identical), only memory and speed do.
pub fn evaluate_tiled<F>(
    model: &Segmenter,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    tile: usize,
    progress: Progress,
    mut visit: F,
) -> Result<ConfusionMatrix>
where
    F: FnMut(&ImageEntry, &RasterImage, &Probabilities) -> Result<()>,
{
    let mut cm = ConfusionMatrix::new(model.classes.len());
    let bar = progress.stage("scoring", entries.len() as u64);
    for e in entries {
        let (img, labels) = dataset.load_pair(e)?;
        let probs = predict_tiled(model, &img, tile);
        cm.add(&labels.indices, &probs.argmax(), Some(UNLABELLED as u32))?;
        visit(e, &img, &probs)?;
        bar.inc(1);
    }
    bar.finish_and_clear();
    if cm.total() == 0 {
        return Err(GroveError::Data(format!(
            "{}: the scored images have no labelled pixels",
            dataset.root.display()
        )));
    }
    Ok(cm)
}

//! Scoring a segmenter on labelled images and reporting the figures.

use serde::Serialize;

use crate::dataset::{ClassTable, Dataset, ImageEntry, UNLABELLED};
use crate::error::{GroveError, Result};
use crate::eval::boundary::{BoundaryCounts, DEFAULT_TOLERANCE};
use crate::eval::confusion::ConfusionMatrix;
use crate::imageio::RasterImage;
use crate::prediction::Prediction;
use crate::progress::Progress;
use crate::segmenter::{Probabilities, Segmenter};
use crate::smooth::{SmoothMethod, SmoothSettings};
use crate::tiling::DEFAULT_TILE;

/// Pixel and boundary counts of one labelling of some images, pooled and per image.
#[derive(Clone, Debug)]
pub struct Scores {
    pub confusion: ConfusionMatrix,
    pub boundary: BoundaryCounts,
    pub per_image: Vec<ImageScores>,
    /// All pixels of the scored images, labelled or not (to tell dense labels from scribbles).
    pub pixels: u64,
}

/// One image's counts.
#[derive(Clone, Debug)]
pub struct ImageScores {
    pub name: String,
    pub confusion: ConfusionMatrix,
    pub boundary: BoundaryCounts,
}

/// Below this share of labelled pixels the labels are taken for scribbles, and boundary F1
/// is reported with a warning that it only sees where strokes of two classes touch.
pub const SPARSE_LABELS: f64 = 0.5;

impl Scores {
    pub fn new(n_classes: usize) -> Self {
        Scores {
            confusion: ConfusionMatrix::new(n_classes),
            boundary: BoundaryCounts::new(n_classes, DEFAULT_TOLERANCE)
                .expect("the default tolerance is valid"),
            per_image: Vec::new(),
            pixels: 0,
        }
    }

    /// Scores one image's predicted class indices against its true ones (`UNLABELLED` is
    /// ignored).
    pub fn add(
        &mut self,
        name: &str,
        width: usize,
        height: usize,
        truth: &[u8],
        pred: &[u8],
    ) -> Result<()> {
        let mut cm = ConfusionMatrix::new(self.confusion.n_classes());
        cm.add(truth, pred, Some(UNLABELLED as u32))?;
        let mut b = BoundaryCounts::new(self.boundary.n_classes(), self.boundary.tolerance())?;
        b.add(width, height, truth, pred, UNLABELLED)?;
        self.confusion.merge(&cm)?;
        self.boundary.merge(&b)?;
        self.pixels += (width * height) as u64;
        self.per_image.push(ImageScores {
            name: name.to_string(),
            confusion: cm,
            boundary: b,
        });
        Ok(())
    }

    pub fn pixel_accuracy(&self) -> Option<f64> {
        self.confusion.pixel_accuracy()
    }

    pub fn mean_iou(&self) -> Option<f64> {
        self.confusion.mean_iou()
    }

    /// Pooled boundary F1; None when the truth has no boundaries (see `eval::boundary`).
    pub fn boundary_f1(&self) -> Option<f64> {
        self.boundary.mean_f1()
    }

    /// Adds another labelling's counts (e.g. the held-out images of another cross-validation
    /// fold), keeping its images' own scores.
    pub fn merge(&mut self, other: &Scores) -> Result<()> {
        self.confusion.merge(&other.confusion)?;
        self.boundary.merge(&other.boundary)?;
        self.per_image.extend(other.per_image.iter().cloned());
        self.pixels += other.pixels;
        Ok(())
    }

    /// True when fewer than half the pixels are labelled (scribbles).
    pub fn sparse_labels(&self) -> bool {
        (self.confusion.total() as f64) < SPARSE_LABELS * self.pixels as f64
    }
}

/// One image's figures in the JSON report.
#[derive(Clone, Debug, Serialize)]
pub struct ImageReport {
    pub image: String,
    pub pixel_accuracy: Option<f64>,
    pub mean_iou: Option<f64>,
    pub boundary_f1: Option<f64>,
    pub labelled_pixels: u64,
    /// Class name → predicted and true share of this image's labelled pixels.
    pub area_fraction: serde_json::Map<String, serde_json::Value>,
}

/// A class's share of the labelled pixels in the prediction and in the truth. Only labelled
/// pixels count: with scribbles these are shares of the strokes, not of the scene.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct AreaFraction {
    pub predicted: f64,
    #[serde(rename = "true")]
    pub truth: f64,
}

/// Per class, its [`AreaFraction`] over the labelled pixels of `cm` (all 0 when none are).
pub fn area_fractions(cm: &ConfusionMatrix) -> Vec<AreaFraction> {
    let total = cm.total().max(1) as f64;
    (0..cm.n_classes())
        .map(|c| AreaFraction {
            predicted: cm.predicted_count(c) as f64 / total,
            truth: cm.truth_count(c) as f64 / total,
        })
        .collect()
}

/// What the area fractions are shares of (written beside them, because with scribble
/// labels they are not shares of the scene).
pub const AREA_FRACTION_BASIS: &str =
    "labelled pixels only: the share of each class among the pixels that have a true label, in the truth and in the prediction there";

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
    /// Mean over classes of the boundary F1 (`eval::boundary`); null when the truth has no
    /// boundaries between labelled classes.
    pub boundary_f1: Option<f64>,
    /// Class name → boundary F1 (null when the class has no boundary pixels).
    pub per_class_boundary_f1: serde_json::Map<String, serde_json::Value>,
    pub boundary_tolerance_px: f32,
    /// Share of the scored images' pixels that are labelled (below 0.5: scribbles, and
    /// boundary F1 only sees where strokes of two classes touch).
    pub labelled_fraction: f64,
    /// Class name → {"predicted", "true"}: share of the labelled pixels ([`AreaFraction`]).
    pub area_fraction: serde_json::Map<String, serde_json::Value>,
    /// What `area_fraction` is a share of ([`AREA_FRACTION_BASIS`]).
    pub area_fraction_basis: String,
    pub per_image: Vec<ImageReport>,
    /// The smoothing the maps were made with ("none", "expansion", "meanfield").
    pub smooth_method: String,
    /// Its strength (0 for none).
    pub smooth_strength: f32,
    /// `eval --compare-smoothing`: method name → the same report for that method, in the
    /// order none, expansion, meanfield.
    #[serde(skip_serializing_if = "Vec::is_empty", serialize_with = "ordered_map")]
    pub smoothing: Vec<(String, MetricsReport)>,
}

/// A list of pairs as a JSON object that keeps their order.
fn ordered_map<S: serde::Serializer>(
    pairs: &[(String, MetricsReport)],
    ser: S,
) -> std::result::Result<S::Ok, S::Error> {
    use serde::ser::SerializeMap;
    let mut map = ser.serialize_map(Some(pairs.len()))?;
    for (k, v) in pairs {
        map.serialize_entry(k, v)?;
    }
    map.end()
}

impl MetricsReport {
    pub fn new(scores: &Scores, classes: &ClassTable) -> Self {
        let cm = &scores.confusion;
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
        let areas = |cm: &ConfusionMatrix| {
            names
                .iter()
                .zip(area_fractions(cm))
                .map(|(n, a)| (n.clone(), serde_json::json!(a)))
                .collect()
        };
        MetricsReport {
            generator: crate::output_guard::generator(),
            pixel_accuracy: cm.pixel_accuracy().unwrap_or(0.0),
            mean_iou: cm.mean_iou().unwrap_or(0.0),
            mean_class_accuracy: cm.mean_class_accuracy().unwrap_or(0.0),
            per_class_iou: by_name(cm.per_class_iou()),
            per_class_accuracy: by_name(cm.per_class_accuracy()),
            confusion: (0..k)
                .map(|t| (0..k).map(|p| cm.get(t, p)).collect())
                .collect(),
            classes: classes.names(),
            labelled_pixels: cm.total(),
            images: scores.per_image.iter().map(|i| i.name.clone()).collect(),
            boundary_f1: scores.boundary_f1(),
            per_class_boundary_f1: by_name(scores.boundary.per_class_f1()),
            boundary_tolerance_px: scores.boundary.tolerance(),
            labelled_fraction: cm.total() as f64 / scores.pixels.max(1) as f64,
            area_fraction: areas(cm),
            area_fraction_basis: AREA_FRACTION_BASIS.into(),
            per_image: scores
                .per_image
                .iter()
                .map(|i| ImageReport {
                    image: i.name.clone(),
                    pixel_accuracy: i.confusion.pixel_accuracy(),
                    mean_iou: i.confusion.mean_iou(),
                    boundary_f1: i.boundary.mean_f1(),
                    labelled_pixels: i.confusion.total(),
                    area_fraction: areas(&i.confusion),
                })
                .collect(),
            smooth_method: SmoothMethod::None.name().into(),
            smooth_strength: 0.0,
            smoothing: Vec::new(),
        }
    }

    /// Records that the maps were smoothed with `settings`.
    pub fn smoothed_with(mut self, settings: &SmoothSettings) -> Self {
        self.smooth_method = settings.method.name().into();
        self.smooth_strength = match settings.method {
            SmoothMethod::None => 0.0,
            _ => settings.strength,
        };
        self
    }

    /// Side-by-side scores of several smoothings (`eval --compare-smoothing`).
    pub fn comparison_table(&self) -> String {
        let mut s = "the same forest prediction, smoothed three ways:\n".to_string();
        s += &format!(
            "{:<26}  {:>8}  {:>8}  {:>11}  {:>14}\n",
            "smoothing", "accuracy", "mean IoU", "boundary F1", "class accuracy"
        );
        for (_, r) in &self.smoothing {
            let method = match r.smooth_method.as_str() {
                "none" => "none".to_string(),
                m => format!("{m}, strength {}", r.smooth_strength),
            };
            s += &format!(
                "{:<26}  {:>8.4}  {:>8.4}  {:>11}  {:>14.4}\n",
                method,
                r.pixel_accuracy,
                r.mean_iou,
                r.boundary_f1.map_or("-".to_string(), |b| format!("{b:.4}")),
                r.mean_class_accuracy
            );
        }
        s
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
        let smoothing = match self.smooth_method.as_str() {
            "none" => "no smoothing".to_string(),
            m => format!("smoothing {m}, strength {}", self.smooth_strength),
        };
        let mut s = format!(
            "{} images, {} labelled pixels, {smoothing}\npixel accuracy {:.4}   mean IoU {:.4}   mean class accuracy {:.4}   boundary F1 {} (within {} px)\n",
            self.images.len(),
            self.labelled_pixels,
            self.pixel_accuracy,
            self.mean_iou,
            self.mean_class_accuracy,
            self.boundary_f1.map_or("-".to_string(), |b| format!("{b:.4}")),
            self.boundary_tolerance_px
        );
        if let Some(note) = self.boundary_note() {
            s += &format!("note: {note}\n");
        }
        s += &format!(
            "\n{:<width$}  {:>6}  {:>8}  {:>11}  {:>9}  {:>9}\n",
            "class", "IoU", "accuracy", "boundary F1", "true area", "predicted"
        );
        for name in &self.classes {
            let area = |key: &str| {
                self.area_fraction[name][key]
                    .as_f64()
                    .map_or("-".into(), |a| format!("{:.1} %", 100.0 * a))
            };
            s += &format!(
                "{:<width$}  {}  {:>8}  {:>11}  {:>9}  {:>9}\n",
                name,
                fmt(&self.per_class_iou[name]),
                fmt(&self.per_class_accuracy[name]),
                fmt(&self.per_class_boundary_f1[name]),
                area("true"),
                area("predicted")
            );
        }
        s +=
            "(area: share of the labelled pixels only, in the truth and in the prediction there)\n";
        if self.per_image.len() > 1 {
            let iw = self
                .per_image
                .iter()
                .map(|i| i.image.len())
                .max()
                .unwrap_or(5)
                .max(5);
            let opt = |v: Option<f64>| v.map_or("   -  ".to_string(), |x| format!("{x:6.4}"));
            s += &format!(
                "\n{:<iw$}  {:>8}  {:>8}  {:>11}\n",
                "image", "accuracy", "mean IoU", "boundary F1"
            );
            for i in &self.per_image {
                s += &format!(
                    "{:<iw$}  {:>8}  {:>8}  {:>11}\n",
                    i.image,
                    opt(i.pixel_accuracy),
                    opt(i.mean_iou),
                    opt(i.boundary_f1)
                );
            }
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

    /// Why boundary F1 is missing or says little, if it does.
    pub fn boundary_note(&self) -> Option<String> {
        let sparse = self.labelled_fraction < SPARSE_LABELS;
        match (self.boundary_f1, sparse) {
            (None, _) => Some(
                "boundary F1 is not defined: no two labelled classes touch in the truth (scribble labels?)"
                    .into(),
            ),
            (Some(_), true) => Some(format!(
                "only {:.0} % of pixels are labelled (scribbles?): boundary F1 sees only where strokes of two classes touch",
                100.0 * self.labelled_fraction
            )),
            (Some(_), false) => None,
        }
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

/// Predicts every labelled image in `entries` and scores it.
pub fn evaluate(
    model: &Segmenter,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    progress: Progress,
) -> Result<Scores> {
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
) -> Result<Scores>
where
    F: FnMut(&ImageEntry, &RasterImage, &Probabilities) -> Result<()>,
{
    evaluate_tiled(model, dataset, entries, DEFAULT_TILE, progress, visit)
}

/// As [`evaluate_with`], predicting in tiles of `tile` pixels (0 = whole images); the scores
/// do not depend on it (tiled prediction is bit-identical), only memory and speed do. No
/// smoothing: [`evaluate_smoothed`] scores smoothed maps.
pub fn evaluate_tiled<F>(
    model: &Segmenter,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    tile: usize,
    progress: Progress,
    mut visit: F,
) -> Result<Scores>
where
    F: FnMut(&ImageEntry, &RasterImage, &Probabilities) -> Result<()>,
{
    let none = SmoothSettings {
        method: SmoothMethod::None,
        ..SmoothSettings::default()
    };
    let scores = evaluate_smoothed(
        model,
        dataset,
        entries,
        tile,
        &[none],
        progress,
        |e, img, p| visit(e, img, &p[0].probabilities),
    )?;
    Ok(scores.into_iter().next().expect("one setting, one score"))
}

/// Scores the maps of every labelled image in `entries` under each of `settings`
/// (validated), from one forest prediction per image ([`Segmenter::predictions`]), and
/// hands the predictions, in `settings` order, to `visit`. One [`Scores`] per setting.
pub fn evaluate_smoothed<F>(
    model: &Segmenter,
    dataset: &Dataset,
    entries: &[&ImageEntry],
    tile: usize,
    settings: &[SmoothSettings],
    progress: Progress,
    mut visit: F,
) -> Result<Vec<Scores>>
where
    F: FnMut(&ImageEntry, &RasterImage, &[Prediction]) -> Result<()>,
{
    let mut scores = vec![Scores::new(model.classes.len()); settings.len()];
    let bar = progress.stage("scoring", entries.len() as u64);
    for e in entries {
        let (img, labels) = dataset.load_pair(e)?;
        let predictions = model.predictions(&img, tile, settings);
        for (s, p) in scores.iter_mut().zip(&predictions) {
            s.add(&e.stem, img.width, img.height, &labels.indices, &p.labels)?;
        }
        visit(e, &img, &predictions)?;
        bar.inc(1);
    }
    bar.finish_and_clear();
    if scores.first().is_some_and(|s| s.confusion.total() == 0) {
        return Err(GroveError::Data(format!(
            "{}: the scored images have no labelled pixels",
            dataset.root.display()
        )));
    }
    Ok(scores)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dataset::classes::ClassInfo;

    fn two_classes() -> ClassTable {
        ClassTable::new(
            ["a", "b"]
                .iter()
                .enumerate()
                .map(|(i, n)| ClassInfo {
                    id: i as u8,
                    name: n.to_string(),
                    color: [i as u8 * 100, 0, 0],
                })
                .collect(),
        )
        .unwrap()
    }

    /// Two 4×1 images: one dense with a boundary predicted one pixel off, one scribbled
    /// (strokes that do not touch); the report pools them and keeps them per image.
    #[test]
    fn report_pools_and_keeps_per_image_boundary_f1() {
        let mut s = Scores::new(2);
        s.add("dense", 4, 1, &[0, 0, 1, 1], &[0, 1, 1, 1]).unwrap();
        s.add("strokes", 4, 1, &[0, 255, 255, 1], &[0, 0, 1, 1])
            .unwrap();
        assert!(!s.sparse_labels());
        let r = MetricsReport::new(&s, &two_classes());
        assert_eq!(r.images, vec!["dense", "strokes"]);
        // Dense image: boundary pixels within 2 px of each other, F1 1 per class.
        assert_eq!(r.per_image[0].boundary_f1, Some(1.0));
        assert_eq!(r.per_image[1].boundary_f1, None);
        assert_eq!(r.boundary_f1, Some(1.0));
        assert_eq!(r.labelled_fraction, 6.0 / 8.0);
        // Areas over labelled pixels only, counted by hand: truth a = 2 + 1 of 6, predicted
        // a = 1 + 1 of 6; the dense image alone: truth a 2 of 4, predicted 1 of 4.
        assert_eq!(r.area_fraction["a"]["true"], 0.5);
        assert_eq!(r.area_fraction["a"]["predicted"], 2.0 / 6.0);
        assert_eq!(r.per_image[0].area_fraction["a"]["predicted"], 0.25);
        assert_eq!(r.per_image[0].area_fraction["b"]["true"], 0.5);
        assert!(r.to_table().contains("33.3 %"));
        let json: serde_json::Value = serde_json::from_str(&r.to_json()).unwrap();
        for key in [
            "boundary_f1",
            "per_class_boundary_f1",
            "per_image",
            "mean_iou",
        ] {
            assert!(json.get(key).is_some(), "JSON key {key}");
        }
        assert!(r.to_table().contains("boundary F1 1.0000"));

        let mut scribbled = Scores::new(2);
        scribbled
            .add("strokes", 4, 1, &[0, 255, 255, 1], &[0, 0, 1, 1])
            .unwrap();
        let r = MetricsReport::new(&scribbled, &two_classes());
        assert!(r.to_table().contains("not defined"));
        assert!(r.to_json().contains("\"boundary_f1\": null"));
    }
}

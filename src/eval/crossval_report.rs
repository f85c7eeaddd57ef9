//! The figures of a cross-validation as `crossval --json` writes them and as a terminal table:
//! the pooled scores under the same keys as `eval --json`, plus one entry per fold and the
//! mean ± sd over folds.

use serde::Serialize;

use crate::dataset::ClassTable;
use crate::eval::crossval::CrossValidation;
use crate::eval::score::MetricsReport;

/// Mean and sample standard deviation (n − 1 denominator) of a score over the folds where
/// it is defined.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct MeanSd {
    pub mean: f64,
    /// None with a single defined value.
    pub sd: Option<f64>,
    /// Folds where the score is defined.
    pub folds: usize,
}

impl MeanSd {
    pub fn of(values: impl IntoIterator<Item = Option<f64>>) -> Option<MeanSd> {
        let v: Vec<f64> = values.into_iter().flatten().collect();
        if v.is_empty() {
            return None;
        }
        let n = v.len() as f64;
        let mean = v.iter().sum::<f64>() / n;
        let sd = (v.len() > 1)
            .then(|| (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt());
        Some(MeanSd {
            mean,
            sd,
            folds: v.len(),
        })
    }

    /// `0.8123 ± 0.0101` (just the mean with one fold).
    pub fn show(&self) -> String {
        match self.sd {
            Some(sd) => format!("{:.4} ± {sd:.4}", self.mean),
            None => format!("{:.4}", self.mean),
        }
    }
}

/// One fold's figures.
#[derive(Clone, Debug, Serialize)]
pub struct FoldReport {
    /// 1-based.
    pub fold: usize,
    /// Held-out image names (stems).
    pub images: Vec<String>,
    pub training_images: usize,
    pub pixel_accuracy: Option<f64>,
    pub mean_iou: Option<f64>,
    pub boundary_f1: Option<f64>,
    /// Class name → IoU (null when absent from truth and prediction in this fold).
    pub per_class_iou: serde_json::Map<String, serde_json::Value>,
    pub labelled_pixels: u64,
    /// Rows truth, columns prediction, in class order (the pooled `confusion` is their sum).
    pub confusion: Vec<Vec<u64>>,
    pub oob_accuracy: Option<f64>,
}

/// Mean ± sd over folds.
#[derive(Clone, Debug, Serialize)]
pub struct FoldSummary {
    pub pixel_accuracy: Option<MeanSd>,
    pub mean_iou: Option<MeanSd>,
    pub boundary_f1: Option<MeanSd>,
    /// Class name → mean ± sd of its IoU (null when absent in every fold).
    pub per_class_iou: serde_json::Map<String, serde_json::Value>,
    pub oob_accuracy: Option<MeanSd>,
    /// `per_class_iou` in class order, typed.
    #[serde(skip)]
    pub class_iou: Vec<Option<MeanSd>>,
}

/// `crossval --json`.
#[derive(Clone, Debug, Serialize)]
pub struct CrossvalReport {
    /// Pooled over all held-out predictions: the keys of `eval --json`.
    #[serde(flatten)]
    pub pooled: MetricsReport,
    pub n_folds: usize,
    pub seed: u64,
    pub leave_one_image_out: bool,
    pub folds: Vec<FoldReport>,
    pub summary: FoldSummary,
}

/// Above this many folds the per-class table shows only mean ± sd (the JSON has them all).
const MAX_FOLD_COLUMNS: usize = 10;

impl CrossvalReport {
    pub fn new(cv: &CrossValidation, classes: &ClassTable) -> Self {
        let names = classes.names();
        let folds: Vec<FoldReport> = cv
            .folds
            .iter()
            .enumerate()
            .map(|(i, f)| {
                let cm = &f.scores.confusion;
                FoldReport {
                    fold: i + 1,
                    images: f.held_out.clone(),
                    training_images: f.training_images,
                    pixel_accuracy: cm.pixel_accuracy(),
                    mean_iou: cm.mean_iou(),
                    boundary_f1: f.scores.boundary_f1(),
                    per_class_iou: names
                        .iter()
                        .zip(cm.per_class_iou())
                        .map(|(n, v)| (n.clone(), serde_json::json!(v)))
                        .collect(),
                    labelled_pixels: cm.total(),
                    confusion: (0..names.len())
                        .map(|t| (0..names.len()).map(|p| cm.get(t, p)).collect())
                        .collect(),
                    oob_accuracy: f.oob_accuracy,
                }
            })
            .collect();
        let over = |get: &dyn Fn(&FoldReport) -> Option<f64>| MeanSd::of(folds.iter().map(get));
        let class_iou: Vec<Option<MeanSd>> = names
            .iter()
            .map(|n| over(&|f| f.per_class_iou[n].as_f64()))
            .collect();
        let summary = FoldSummary {
            pixel_accuracy: over(&|f| f.pixel_accuracy),
            mean_iou: over(&|f| f.mean_iou),
            boundary_f1: over(&|f| f.boundary_f1),
            per_class_iou: names
                .iter()
                .zip(&class_iou)
                .map(|(n, m)| (n.clone(), serde_json::json!(m)))
                .collect(),
            oob_accuracy: over(&|f| f.oob_accuracy),
            class_iou,
        };
        CrossvalReport {
            pooled: MetricsReport::new(&cv.pooled, classes).smoothed_with(&cv.smoothing),
            n_folds: folds.len(),
            seed: cv.seed,
            leave_one_image_out: cv.leave_one_image_out,
            folds,
            summary,
        }
    }

    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("crossval report serialises") + "\n"
    }

    /// Per-fold and mean ± sd tables, then the pooled scores. `colour` = bold headings and
    /// mean rows (for a terminal; padding is computed before the escapes, so columns align).
    pub fn to_table(&self, colour: bool) -> String {
        let bold = |s: String| {
            if colour {
                format!("\x1b[1m{s}\x1b[0m")
            } else {
                s
            }
        };
        let opt = |v: Option<f64>| v.map_or("-".to_string(), |x| format!("{x:.4}"));
        let ms = |v: &Option<MeanSd>| v.as_ref().map_or("-".to_string(), MeanSd::show);
        let mut s = format!(
            "{} folds by image{} (seed {}), {} labelled images\n\n",
            self.n_folds,
            if self.leave_one_image_out {
                ", leave-one-image-out"
            } else {
                ""
            },
            self.seed,
            self.pooled.images.len()
        );
        let shown = |f: &FoldReport| {
            let all = f.images.join(", ");
            if all.chars().count() > 36 {
                let cut: String = all.chars().take(35).collect();
                format!("{cut}…")
            } else {
                all
            }
        };
        let iw = self
            .folds
            .iter()
            .map(|f| shown(f).chars().count())
            .max()
            .unwrap_or(0)
            .max("held-out images".len());
        let fw = "mean ± sd".chars().count();
        let nw = 15; // "0.8123 ± 0.0101"
        s += &bold(format!(
            "{:<fw$}  {:<iw$}  {:>nw$}  {:>nw$}  {:>nw$}",
            "fold", "held-out images", "pixel accuracy", "mean IoU", "boundary F1"
        ));
        s += "\n";
        for f in &self.folds {
            let images = shown(f);
            let pad = iw - images.chars().count();
            s += &format!(
                "{:<fw$}  {images}{:pad$}  {:>nw$}  {:>nw$}  {:>nw$}\n",
                f.fold,
                "",
                opt(f.pixel_accuracy),
                opt(f.mean_iou),
                opt(f.boundary_f1)
            );
        }
        let sm = &self.summary;
        // `±` is one char but two bytes: pad by chars, not by `format!` widths.
        let right =
            |t: String, w: usize| format!("{}{t}", " ".repeat(w.saturating_sub(t.chars().count())));
        s += &bold(format!(
            "{:<fw$}  {:<iw$}  {}  {}  {}",
            "mean ± sd",
            "",
            right(ms(&sm.pixel_accuracy), nw),
            right(ms(&sm.mean_iou), nw),
            right(ms(&sm.boundary_f1), nw)
        ));
        s += "\n\n";

        let cw = self
            .pooled
            .classes
            .iter()
            .map(|c| c.chars().count())
            .max()
            .unwrap_or(5)
            .max("class IoU".len());
        let per_fold = self.folds.len() <= MAX_FOLD_COLUMNS;
        let mut head = format!("{:<cw$}", "class IoU");
        if per_fold {
            for f in &self.folds {
                head += &right(format!("fold {}", f.fold), 8);
            }
        }
        head += &format!("  {}", right("mean ± sd".into(), nw));
        s += &bold(head);
        s += "\n";
        for (name, m) in self.pooled.classes.iter().zip(&sm.class_iou) {
            s += name;
            s += &" ".repeat(cw - name.chars().count());
            if per_fold {
                for f in &self.folds {
                    s += &right(opt(f.per_class_iou[name].as_f64()), 8);
                }
            }
            s += &format!("  {}\n", right(ms(m), nw));
        }
        if !per_fold {
            s += &format!(
                "(per-fold class IoU of {} folds: see --json)\n",
                self.folds.len()
            );
        }
        if let Some(oob) = &sm.oob_accuracy {
            s += &format!(
                "\nout-of-bag accuracy of the fold models {} on sampled training pixels: optimistic next to the held-out scores above\n",
                oob.show()
            );
        }
        s += &format!(
            "\n{}\n",
            bold("pooled over all held-out predictions".into())
        );
        s += &self.pooled.to_table();
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Sample sd by hand: values 0.5, 0.7, 0.9 → mean 0.7, sd √((0.04 + 0 + 0.04) / 2) = 0.2.
    #[test]
    fn mean_and_sample_sd() {
        let m = MeanSd::of([Some(0.5), None, Some(0.7), Some(0.9)]).unwrap();
        assert!((m.mean - 0.7).abs() < 1e-12);
        assert!((m.sd.unwrap() - 0.2).abs() < 1e-12);
        assert_eq!(m.folds, 3);
        assert_eq!(m.show(), "0.7000 ± 0.2000");
        assert_eq!(MeanSd::of([Some(0.3)]).unwrap().sd, None);
        assert_eq!(MeanSd::of([None]), None);
    }
}

//! What `apply` delivers per image: a label PNG (palette = class colours, pixel value =
//! class id, so it can be corrected and fed back as training labels), a colour overlay on
//! the image, and on request a confidence map and per-class probability maps.
//!
//! Layout under the output folder: `labels/STEM.png`, `overlays/STEM.png`,
//! `confidence/STEM.png`, `uncertainty/{margin,entropy}/STEM.png`,
//! `probabilities/STEM/CLASS.png`.

pub mod stream;

use std::path::{Path, PathBuf};

use crate::dataset::ClassTable;
use crate::error::Result;
use crate::imageio::{output_path, RasterImage};
use crate::prediction::Prediction;

/// Which optional outputs to write (serialised into batch resume records).
#[derive(Clone, Debug, serde::Serialize)]
pub struct OutputOptions {
    pub overlay: bool,
    pub confidence: bool,
    pub probabilities: bool,
    /// Margin and entropy maps (see `eval::uncertainty`).
    pub uncertainty: bool,
    /// Weight of the class colour in the overlay (0 = image only, 1 = colours only).
    pub overlay_opacity: f32,
    /// Class indices left untinted in overlays (`--no-tint`), sorted: a black background
    /// class tinted grey would hide nothing but dim the image.
    pub untinted: Vec<u8>,
}

impl OutputOptions {
    /// The colour weight of each class in the overlay.
    pub fn tint(&self, n_classes: usize) -> Vec<f32> {
        (0..n_classes)
            .map(|c| {
                if self.untinted.contains(&(c as u8)) {
                    0.0
                } else {
                    self.overlay_opacity
                }
            })
            .collect()
    }
}

impl Default for OutputOptions {
    fn default() -> Self {
        OutputOptions {
            overlay: true,
            confidence: false,
            probabilities: false,
            uncertainty: false,
            overlay_opacity: 0.45,
            untinted: Vec::new(),
        }
    }
}

/// A value in [0, 1] as a byte (rounded, clamped).
pub(crate) fn to_u8(v: f32) -> u8 {
    (v * 255.0).round().clamp(0.0, 255.0) as u8
}

/// Blends class colours over the image; `tint` is the colour weight of each class index
/// (0 = that class shows the image as it is).
pub fn overlay(
    image: &RasterImage,
    class_index: &[u8],
    classes: &ClassTable,
    tint: &[f32],
) -> Vec<u8> {
    let mut rgb = image.to_rgb8();
    let colours: Vec<[u8; 3]> = classes.classes().iter().map(|c| c.color).collect();
    for (px, &c) in rgb.chunks_exact_mut(3).zip(class_index) {
        let col = colours[c as usize];
        let opacity = tint[c as usize];
        if opacity == 0.0 {
            continue;
        }
        for k in 0..3 {
            px[k] = (px[k] as f32 * (1.0 - opacity) + col[k] as f32 * opacity).round() as u8;
        }
    }
    rgb
}

/// Where the outputs of image `stem` go (the one place that knows the layout); the names
/// are made safe by [`output_path`], so a stem or class name cannot leave `out_dir`.
pub struct OutputPaths {
    pub labels: PathBuf,
    pub overlay: Option<PathBuf>,
    pub confidence: Option<PathBuf>,
    /// Margin and entropy maps.
    pub uncertainty: Option<[PathBuf; 2]>,
    /// One per class, in class-table order.
    pub probabilities: Vec<PathBuf>,
}

impl OutputPaths {
    pub fn new(out_dir: &Path, stem: &str, classes: &ClassTable, opts: &OutputOptions) -> Self {
        let in_sub = |sub: &str| output_path(&out_dir.join(sub), stem, "png");
        let prob_dir = out_dir
            .join("probabilities")
            .join(crate::output_guard::safe_file_name(stem));
        OutputPaths {
            labels: in_sub("labels"),
            overlay: opts.overlay.then(|| in_sub("overlays")),
            confidence: opts.confidence.then(|| in_sub("confidence")),
            uncertainty: opts
                .uncertainty
                .then(|| [in_sub("uncertainty/margin"), in_sub("uncertainty/entropy")]),
            probabilities: if opts.probabilities {
                classes
                    .classes()
                    .iter()
                    .map(|c| output_path(&prob_dir, &c.name, "png"))
                    .collect()
            } else {
                Vec::new()
            },
        }
    }

    /// Every path, for checking them all before any work starts.
    pub fn all(&self) -> Vec<&Path> {
        let mut v = vec![self.labels.as_path()];
        v.extend(self.overlay.as_deref());
        v.extend(self.confidence.as_deref());
        v.extend(self.uncertainty.iter().flatten().map(PathBuf::as_path));
        v.extend(self.probabilities.iter().map(PathBuf::as_path));
        v
    }
}

/// What [`write_outputs`] wrote for one image.
pub struct WrittenOutputs {
    /// Class index (not id) per pixel, the map the files show.
    pub index: Vec<u8>,
    /// Every file written.
    pub files: Vec<PathBuf>,
}

/// Writes the outputs for one image: maps of `prediction.labels`, confidence, uncertainty
/// and probability maps of `prediction.probabilities` (smoothed ones after mean-field),
/// through the same writers as an image streamed band by band ([`stream::MapWriters`]).
pub fn write_outputs(
    out_dir: &Path,
    stem: &str,
    image: &RasterImage,
    prediction: &Prediction,
    classes: &ClassTable,
    opts: &OutputOptions,
) -> Result<WrittenOutputs> {
    let probs = &prediction.probabilities;
    let size = (probs.width, probs.height);
    let mut writers = stream::MapWriters::create(out_dir, stem, size, classes, opts)?;
    writers.write_band(image, prediction)?;
    Ok(WrittenOutputs {
        index: prediction.labels.clone(),
        files: writers.finish()?,
    })
}

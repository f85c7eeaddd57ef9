//! What `apply` delivers per image: a label map (palette = class colours, pixel value =
//! class id, so it can be corrected and fed back as training labels), a colour overlay on
//! the image, and on request a confidence map and per-class probability maps.
//!
//! Layout under the output folder (EXT = png, or tif with `--map-format tiff`):
//! `labels/STEM.EXT`, `overlays/STEM.EXT`, `confidence/STEM.EXT`,
//! `uncertainty/{margin,entropy}/STEM.EXT`, `probabilities/STEM/CLASS.EXT` or, with
//! `--probabilities npy`, `probabilities/STEM.npy` (float32, height × width × classes).

pub mod stream;

use std::path::{Path, PathBuf};

use crate::dataset::ClassTable;
use crate::error::Result;
use crate::imageio::tiff_tags::TiffTag;
use crate::imageio::{output_path, RasterImage};
use crate::prediction::Prediction;
pub use stream::MapFormat;

/// How per-class probabilities are written (`--probabilities maps|npy`).
#[derive(
    Clone,
    Copy,
    Debug,
    Default,
    PartialEq,
    Eq,
    clap::ValueEnum,
    serde::Serialize,
    serde::Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum ProbabilityFormat {
    /// One 8-bit map per class (probability × 255) under probabilities/NAME/, in the
    /// --map-format (png or tiff).
    #[default]
    #[value(alias = "png", alias = "tiff")]
    Maps,
    /// probabilities/NAME.npy: float32, height × width × classes in class-table order
    /// (numpy.load).
    Npy,
}

fn is_default<T: Default + PartialEq>(v: &T) -> bool {
    *v == T::default()
}

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
    /// Format of the probabilities when `probabilities` is on. Left out of the resume
    /// records at its default, so records of earlier runs still match.
    #[serde(skip_serializing_if = "is_default")]
    pub probability_format: ProbabilityFormat,
    /// File format of every map (labels, overlays, confidence, uncertainty, probabilities).
    #[serde(skip_serializing_if = "is_default")]
    pub map_format: MapFormat,
    /// TIFF maps as BigTIFF even when they would fit a standard TIFF.
    #[serde(skip_serializing_if = "is_default")]
    pub bigtiff: bool,
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
            probability_format: ProbabilityFormat::Maps,
            map_format: MapFormat::Png,
            bigtiff: false,
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
    /// One per class, in class-table order (PNG/TIFF maps), or one `.npy` for all classes.
    pub probabilities: Vec<PathBuf>,
}

impl OutputPaths {
    pub fn new(out_dir: &Path, stem: &str, classes: &ClassTable, opts: &OutputOptions) -> Self {
        let ext = opts.map_format.extension();
        let in_sub = |sub: &str| output_path(&out_dir.join(sub), stem, ext);
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
            probabilities: match (opts.probabilities, opts.probability_format) {
                (false, _) => Vec::new(),
                (true, ProbabilityFormat::Npy) => {
                    vec![output_path(&out_dir.join("probabilities"), stem, "npy")]
                }
                (true, ProbabilityFormat::Maps) => classes
                    .classes()
                    .iter()
                    .map(|c| output_path(&prob_dir, &c.name, ext))
                    .collect(),
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

/// The tags an input passes on to its TIFF maps (none for PNG maps or non-TIFF inputs).
pub fn pass_through_tags(source: &Path, opts: &OutputOptions) -> Result<Vec<TiffTag>> {
    match opts.map_format {
        MapFormat::Png => Ok(Vec::new()),
        MapFormat::Tiff => crate::imageio::tiff_tags::read_pass_through_tags(source),
    }
}

/// Writes the outputs for one image: maps of `prediction.labels`, confidence, uncertainty
/// and probability maps of `prediction.probabilities` (smoothed ones after mean-field),
/// through the same writers as an image streamed band by band ([`stream::MapWriters`]);
/// TIFF maps carry `tags` (the input's, see [`pass_through_tags`]).
pub fn write_outputs(
    out_dir: &Path,
    stem: &str,
    image: &RasterImage,
    prediction: &Prediction,
    classes: &ClassTable,
    opts: &OutputOptions,
    tags: &[TiffTag],
) -> Result<WrittenOutputs> {
    let probs = &prediction.probabilities;
    let size = (probs.width, probs.height);
    let mut writers = stream::MapWriters::create(out_dir, stem, size, classes, opts, tags)?;
    writers.write_band(image, prediction)?;
    Ok(WrittenOutputs {
        index: prediction.labels.clone(),
        files: writers.finish()?,
    })
}

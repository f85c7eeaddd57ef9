//! The maps of one image written a band of rows at a time, so that no output of an image too
//! large to hold ever exists whole. The whole-image path writes through the same writers (one
//! band = the whole image), so both paths produce the same files.
//!
//! Two pieces:
//! * [`RowSink`]: one output file filled row by row, and [`open_sink`], the one place that
//!   chooses the file format of a map ([`MapFormat`]: 8-bit PNG, or tiled TIFF carrying the
//!   input's resolution and georeferencing tags). A new format is a new `RowSink` plus a
//!   case in `open_sink`;
//! * [`MapWriters`]: every output `apply` writes for one image (label map, overlay,
//!   confidence, uncertainty and probability maps, or the float `.npy` probabilities), fed
//!   with [`MapWriters::write_band`] top to bottom.
//!
//! Every sink writes to a temporary name and renames it into place in `finish`; a failure or
//! an early drop leaves no partial file under the final name.

use std::path::{Path, PathBuf};

use crate::dataset::ClassTable;
use crate::error::Result;
use crate::eval::uncertainty::UncertaintyMaps;
use crate::imageio::npy::NpyWriter;
use crate::imageio::stream_out::PngRowWriter;
use crate::imageio::tiff_out::{TiffFlavour, TiffPixels, TiffRowWriter};
use crate::imageio::tiff_tags::TiffTag;
use crate::imageio::RasterImage;
use crate::outputs::{overlay, to_u8, OutputOptions, OutputPaths, ProbabilityFormat};
use crate::prediction::Prediction;

/// One output file written row by row, top to bottom.
pub trait RowSink: Send {
    /// Appends whole rows: `width × samples` bytes each (1 sample for grey and label maps,
    /// 3 for RGB).
    fn write_rows(&mut self, bytes: &[u8]) -> Result<()>;
    /// Completes the file (every row must have been written) and renames it into place.
    fn finish(self: Box<Self>) -> Result<()>;
}

impl RowSink for PngRowWriter {
    fn write_rows(&mut self, bytes: &[u8]) -> Result<()> {
        PngRowWriter::write_rows(self, bytes)
    }
    fn finish(self: Box<Self>) -> Result<()> {
        PngRowWriter::finish(*self)
    }
}

impl RowSink for TiffRowWriter {
    fn write_rows(&mut self, bytes: &[u8]) -> Result<()> {
        TiffRowWriter::write_rows(self, bytes)
    }
    fn finish(self: Box<Self>) -> Result<()> {
        TiffRowWriter::finish(*self)
    }
}

/// File format of the output maps (`--map-format`).
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
pub enum MapFormat {
    /// PNG (compressed).
    #[default]
    Png,
    /// Tiled, Deflate-compressed TIFF (BigTIFF when it could pass 4 GiB); a TIFF input's
    /// resolution and georeferencing tags are copied on.
    #[value(alias = "tif")]
    Tiff,
}

impl MapFormat {
    /// File-name extension.
    pub fn extension(self) -> &'static str {
        match self {
            MapFormat::Png => "png",
            MapFormat::Tiff => "tif",
        }
    }
}

/// How a map file is written beyond its pixels: its format, the tags copied from the input
/// (TIFF only) and whether a TIFF must be BigTIFF.
#[derive(Clone, Copy, Debug)]
pub struct MapStyle<'a> {
    pub format: MapFormat,
    pub tags: &'a [TiffTag],
    pub flavour: TiffFlavour,
}

impl OutputOptions {
    /// How this image's maps are written; `tags` from [`crate::outputs::pass_through_tags`].
    pub fn map_style<'a>(&self, tags: &'a [TiffTag]) -> MapStyle<'a> {
        MapStyle {
            format: self.map_format,
            tags,
            flavour: if self.bigtiff {
                TiffFlavour::Big
            } else {
                TiffFlavour::Auto
            },
        }
    }
}

/// What an output map holds per pixel.
#[derive(Clone, Debug)]
pub enum MapKind {
    /// Class ids, shown through this palette (256 RGB triples, flattened).
    Labels(Vec<u8>),
    /// 8-bit RGB.
    Rgb,
    /// 8-bit grey.
    Grey,
}

/// Opens the sink of an output map of `width × height` pixels at `path`.
pub fn open_sink(
    path: &Path,
    width: usize,
    height: usize,
    kind: MapKind,
    style: &MapStyle,
) -> Result<Box<dyn RowSink>> {
    Ok(match style.format {
        MapFormat::Png => {
            use png::ColorType as C;
            let (color, palette) = match kind {
                MapKind::Labels(p) => (C::Indexed, Some(p)),
                MapKind::Rgb => (C::Rgb, None),
                MapKind::Grey => (C::Grayscale, None),
            };
            Box::new(PngRowWriter::create(path, width, height, color, palette)?)
        }
        MapFormat::Tiff => {
            let pixels = match kind {
                MapKind::Labels(p) => TiffPixels::Palette(p),
                MapKind::Rgb => TiffPixels::Rgb8,
                MapKind::Grey => TiffPixels::Grey8,
            };
            Box::new(TiffRowWriter::create(
                path,
                width,
                height,
                pixels,
                style.tags,
                style.flavour,
            )?)
        }
    })
}

/// The open sinks of one image's maps.
pub struct MapWriters {
    classes: ClassTable,
    tint: Vec<f32>,
    labels: Box<dyn RowSink>,
    overlay: Option<Box<dyn RowSink>>,
    confidence: Option<Box<dyn RowSink>>,
    /// Margin, entropy.
    uncertainty: Option<[Box<dyn RowSink>; 2]>,
    /// One per class, in class-table order (`--probabilities maps`).
    probabilities: Vec<Box<dyn RowSink>>,
    /// All classes' float probabilities in one array (`--probabilities npy`).
    npy: Option<NpyWriter>,
    files: Vec<PathBuf>,
}

impl MapWriters {
    /// Opens every output `opts` asks for, for image `stem` of `width × height` pixels; TIFF
    /// maps carry `tags` (see [`crate::outputs::pass_through_tags`]).
    pub fn create(
        out_dir: &Path,
        stem: &str,
        (width, height): (usize, usize),
        classes: &ClassTable,
        opts: &OutputOptions,
        tags: &[TiffTag],
    ) -> Result<MapWriters> {
        let paths = OutputPaths::new(out_dir, stem, classes, opts);
        let style = opts.map_style(tags);
        let open = |p: &PathBuf, kind: MapKind| open_sink(p, width, height, kind, &style);
        let npy = opts.probabilities && opts.probability_format == ProbabilityFormat::Npy;
        let grey = |p: &PathBuf| open(p, MapKind::Grey);
        let palette = classes.palette().iter().flatten().copied().collect();
        Ok(MapWriters {
            classes: classes.clone(),
            tint: opts.tint(classes.len()),
            labels: open(&paths.labels, MapKind::Labels(palette))?,
            overlay: paths
                .overlay
                .as_ref()
                .map(|p| open(p, MapKind::Rgb))
                .transpose()?,
            confidence: paths.confidence.as_ref().map(grey).transpose()?,
            uncertainty: match &paths.uncertainty {
                Some([m, e]) => Some([grey(m)?, grey(e)?]),
                None => None,
            },
            probabilities: if npy {
                Vec::new()
            } else {
                paths
                    .probabilities
                    .iter()
                    .map(grey)
                    .collect::<Result<_>>()?
            },
            npy: match paths.probabilities.first() {
                Some(p) if npy => Some(NpyWriter::create(p, &[height, width, classes.len()])?),
                _ => None,
            },
            files: paths.all().into_iter().map(Path::to_path_buf).collect(),
        })
    }

    /// Writes the next rows of every map: `image` holds those rows of the input (for the
    /// overlay), `prediction` their labels and probabilities.
    pub fn write_band(&mut self, image: &RasterImage, prediction: &Prediction) -> Result<()> {
        let index = &prediction.labels;
        let probs = &prediction.probabilities;
        let ids: Vec<u8> = index
            .iter()
            .map(|&c| self.classes.classes()[c as usize].id)
            .collect();
        self.labels.write_rows(&ids)?;
        if let Some(w) = &mut self.overlay {
            w.write_rows(&overlay(image, index, &self.classes, &self.tint))?;
        }
        let bytes = |v: &[f32]| -> Vec<u8> { v.iter().map(|&x| to_u8(x)).collect() };
        if let Some(w) = &mut self.confidence {
            w.write_rows(&bytes(&probs.confidence()))?;
        }
        if let Some([margin, entropy]) = &mut self.uncertainty {
            let maps = UncertaintyMaps::new(probs);
            margin.write_rows(&bytes(&maps.margin))?;
            entropy.write_rows(&bytes(&maps.entropy))?;
        }
        for (c, w) in self.probabilities.iter_mut().enumerate() {
            w.write_rows(&bytes(&probs.class_plane(c).data))?;
        }
        if let Some(w) = &mut self.npy {
            w.write(&probs.data)?;
        }
        Ok(())
    }

    /// Completes every map and returns the files written.
    pub fn finish(self) -> Result<Vec<PathBuf>> {
        let sinks = std::iter::once(self.labels)
            .chain(self.overlay)
            .chain(self.confidence)
            .chain(self.uncertainty.into_iter().flatten())
            .chain(self.probabilities);
        for s in sinks {
            s.finish()?;
        }
        if let Some(w) = self.npy {
            w.finish()?;
        }
        Ok(self.files)
    }
}

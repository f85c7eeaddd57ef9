//! The maps of one image written a band of rows at a time, so that no output of an image too
//! large to hold ever exists whole. The whole-image path writes through the same writers (one
//! band = the whole image), so both paths produce the same files.
//!
//! Two pieces:
//! * [`RowSink`]: one output file filled row by row, and [`open_sink`], the one place that
//!   chooses the file format for an output path (8-bit PNG today). A new format (a TIFF row
//!   writer, say) is a new `RowSink` plus a case in `open_sink`;
//! * [`MapWriters`]: every map `apply` writes for one image (label map, overlay, confidence,
//!   uncertainty and probability maps), fed with [`MapWriters::write_band`] top to bottom.
//!   An output that is not a row of bytes (float probabilities, say) gets its own field here
//!   and is filled from the band's [`Prediction`].
//!
//! Every sink writes to a temporary name and renames it into place in `finish`; a failure or
//! an early drop leaves no partial file under the final name.

use std::path::{Path, PathBuf};

use crate::dataset::ClassTable;
use crate::error::Result;
use crate::eval::uncertainty::UncertaintyMaps;
use crate::imageio::stream_out::PngRowWriter;
use crate::imageio::RasterImage;
use crate::outputs::{overlay, to_u8, OutputOptions, OutputPaths};
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
) -> Result<Box<dyn RowSink>> {
    use png::ColorType as C;
    let (color, palette) = match kind {
        MapKind::Labels(p) => (C::Indexed, Some(p)),
        MapKind::Rgb => (C::Rgb, None),
        MapKind::Grey => (C::Grayscale, None),
    };
    Ok(Box::new(PngRowWriter::create(
        path, width, height, color, palette,
    )?))
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
    /// One per class, in class-table order.
    probabilities: Vec<Box<dyn RowSink>>,
    files: Vec<PathBuf>,
}

impl MapWriters {
    /// Opens every map `opts` asks for, for image `stem` of `width × height` pixels.
    pub fn create(
        out_dir: &Path,
        stem: &str,
        (width, height): (usize, usize),
        classes: &ClassTable,
        opts: &OutputOptions,
    ) -> Result<MapWriters> {
        let paths = OutputPaths::new(out_dir, stem, classes, opts);
        let open = |p: &PathBuf, kind: MapKind| open_sink(p, width, height, kind);
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
            probabilities: paths
                .probabilities
                .iter()
                .map(grey)
                .collect::<Result<_>>()?,
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
        Ok(self.files)
    }
}

//! Segmenting an image too large to hold (library API; `apply`'s batch driver does not call
//! it yet, it still decodes whole images): the image is read band by band (one row of tiles
//! plus the halo rows), predicted tile by tile ([`crate::tiling::predict_band`]), and every
//! output is written as it goes, row by row (PNG stream writers). Memory is bounded by the
//! tile size and the image width, never by the image height. The outputs are the same files,
//! with the same pixels, as the whole-image path writes (overlays and confidence maps at full
//! resolution, streamed the same way).

use std::path::{Path, PathBuf};

use crate::dataset::ClassTable;
use crate::error::Result;
use crate::eval::areas::count_classes;
use crate::features::stack::Rect;
use crate::imageio::stream::{open_rows, BandReader};
use crate::imageio::stream_out::PngRowWriter;
use crate::imageio::RasterImage;
use crate::outputs::{overlay, to_u8, OutputOptions, OutputPaths};
use crate::segmenter::{Probabilities, Segmenter};
use crate::tiling::{predict_band, TileGrid};

/// Images above this many pixels should take the streaming path (when tiling is on): the
/// whole-image path holds the image, its probabilities and its outputs at once (~60 bytes per
/// pixel with five classes), which stays under 0.5 GB up to here.
pub const STREAM_ABOVE_PIXELS: usize = 8_000_000;

/// What a streamed image produced.
pub struct Streamed {
    pub width: usize,
    pub height: usize,
    /// Pixels per class index (inside the ROI when one is given).
    pub counts: Vec<u64>,
}

/// The open row writers of one image's outputs.
struct Writers {
    labels: PngRowWriter,
    overlay: Option<PngRowWriter>,
    confidence: Option<PngRowWriter>,
    probabilities: Vec<PngRowWriter>,
}

impl Writers {
    fn create(
        out_dir: &Path,
        stem: &str,
        (w, h): (usize, usize),
        classes: &ClassTable,
        opts: &OutputOptions,
    ) -> Result<Writers> {
        use png::ColorType as C;
        let pal: Vec<u8> = classes.palette().iter().flatten().copied().collect();
        let paths = OutputPaths::new(out_dir, stem, classes, opts);
        let grey = |p: &PathBuf| PngRowWriter::create(p, w, h, C::Grayscale, None);
        Ok(Writers {
            labels: PngRowWriter::create(&paths.labels, w, h, C::Indexed, Some(pal))?,
            overlay: paths
                .overlay
                .as_ref()
                .map(|p| PngRowWriter::create(p, w, h, C::Rgb, None))
                .transpose()?,
            confidence: paths.confidence.as_ref().map(grey).transpose()?,
            probabilities: paths
                .probabilities
                .iter()
                .map(grey)
                .collect::<Result<_>>()?,
        })
    }

    fn write_band(
        &mut self,
        image: &RasterImage,
        probs: &Probabilities,
        index: &[u8],
        classes: &ClassTable,
        opts: &OutputOptions,
    ) -> Result<()> {
        let ids: Vec<u8> = index
            .iter()
            .map(|&c| classes.classes()[c as usize].id)
            .collect();
        self.labels.write_rows(&ids)?;
        if let Some(w) = &mut self.overlay {
            w.write_rows(&overlay(image, index, classes, &opts.tint(classes.len())))?;
        }
        if let Some(w) = &mut self.confidence {
            let conf: Vec<u8> = probs.confidence().into_iter().map(to_u8).collect();
            w.write_rows(&conf)?;
        }
        for (c, w) in self.probabilities.iter_mut().enumerate() {
            let p: Vec<u8> = probs.class_plane(c).data.into_iter().map(to_u8).collect();
            w.write_rows(&p)?;
        }
        Ok(())
    }

    fn finish(self) -> Result<()> {
        self.labels.finish()?;
        for w in self.overlay.into_iter().chain(self.confidence) {
            w.finish()?;
        }
        self.probabilities
            .into_iter()
            .try_for_each(PngRowWriter::finish)
    }
}

/// Segments the image at `path` band by band in tiles of `tile` pixels and writes its outputs
/// under `out_dir` as they are produced. `roi` is called with the image size and returns the
/// region-of-interest mask the class counts are restricted to, if any.
pub fn apply_streaming(
    seg: &Segmenter,
    path: &Path,
    out_dir: &Path,
    stem: &str,
    tile: usize,
    opts: &OutputOptions,
    roi: impl FnOnce(usize, usize) -> Result<Option<Vec<bool>>>,
) -> Result<Streamed> {
    let mut reader = BandReader::new(open_rows(path)?);
    let (w, h) = (reader.width(), reader.height());
    let mask = roi(w, h)?;
    let grid = TileGrid::for_image(w, h, tile, &seg.features);
    let k = seg.classes.len();
    let mut writers = Writers::create(out_dir, stem, (w, h), &seg.classes, opts)?;
    let mut counts = vec![0u64; k];
    for band in grid.bands() {
        let pixels = reader.rows(band.window.y, band.window.height)?;
        let probs = predict_band(seg, &pixels, &band, w, h, None);
        let core = pixels.crop(&Rect {
            y: band.core.y - band.window.y,
            ..band.core
        });
        drop(pixels);
        let index = probs.argmax();
        let m = mask
            .as_ref()
            .map(|m| &m[band.core.y * w..(band.core.y + band.core.height) * w]);
        for (total, n) in counts.iter_mut().zip(count_classes(&index, k, m)) {
            *total += n;
        }
        writers.write_band(&core, &probs, &index, &seg.classes, opts)?;
    }
    writers.finish()?;
    Ok(Streamed {
        width: w,
        height: h,
        counts,
    })
}

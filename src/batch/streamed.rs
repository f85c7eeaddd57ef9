//! One image segmented as a stream, for images too large to hold: rows are read band by band
//! (one row of tiles plus the halo rows, [`BandReader`]), predicted tile by tile
//! ([`predict_band`], bit-identical to the whole image), and every map is written as it goes
//! ([`MapWriters`]), on a second thread so PNG encoding overlaps the next band's prediction.
//! The image, its feature stack, its probabilities and its maps never exist whole: memory is
//! bounded by the tile size times the image width.
//!
//! The files, area counts and drift moments are those of the whole-image path with the same
//! tile size (`tests/streaming.rs` compares them byte for byte).

use std::path::{Path, PathBuf};
use std::sync::mpsc::sync_channel;

use crate::error::Result;
use crate::eval::areas::{count_classes, MaskRows};
use crate::eval::drift::FeatureMoments;
use crate::features::stack::Rect;
use crate::imageio::stream::{BandReader, RowSource};
use crate::imageio::tiff_tags::TiffTag;
use crate::imageio::RasterImage;
use crate::outputs::stream::MapWriters;
use crate::outputs::OutputOptions;
use crate::prediction::Prediction;
use crate::segmenter::Segmenter;
use crate::tiling::{predict_band, TileGrid};

/// Images above this many pixels are streamed when tiling is on (`--tile` > 0): below it the
/// whole-image path, which holds the image, its probabilities and its maps at once (~60 bytes
/// per pixel with five classes, under 0.5 GB here), overlaps one image's encoding with the
/// next one's prediction, which pays for batches of many small frames.
pub const STREAM_ABOVE_PIXELS: usize = 8_000_000;

/// Environment variable that replaces [`STREAM_ABOVE_PIXELS`] (tests stream small images).
pub const STREAM_ABOVE_ENV: &str = "GROVE_STREAM_ABOVE_PIXELS";

/// [`STREAM_ABOVE_PIXELS`], or the value of [`STREAM_ABOVE_ENV`] when it is a number.
pub fn stream_above_pixels() -> usize {
    std::env::var(STREAM_ABOVE_ENV)
        .ok()
        .and_then(|v| v.trim().parse().ok())
        .unwrap_or(STREAM_ABOVE_PIXELS)
}

/// What streaming one image produced.
pub struct Streamed {
    pub width: usize,
    pub height: usize,
    /// Pixels per class index (inside the ROI when one is given).
    pub counts: Vec<u64>,
    /// Every file written.
    pub files: Vec<PathBuf>,
    /// The image's feature moments, for the drift warning.
    pub moments: FeatureMoments,
}

/// Segments the image `source` delivers in tiles of `tile` pixels and writes its maps under
/// `out_dir` as they are made (TIFF maps with `tags`); `roi` restricts the counts. `on_rows(done, total)` is told after
/// every band how many rows are finished.
#[allow(clippy::too_many_arguments)]
pub fn segment_streamed(
    model: &Segmenter,
    source: Box<dyn RowSource>,
    out_dir: &Path,
    stem: &str,
    tile: usize,
    opts: &OutputOptions,
    tags: &[TiffTag],
    mut roi: Option<MaskRows>,
    mut on_rows: impl FnMut(usize, usize),
) -> Result<Streamed> {
    let mut reader = BandReader::new(source);
    let (w, h) = (reader.width(), reader.height());
    let grid = TileGrid::for_image(w, h, tile, &model.features);
    let k = model.classes.len();
    let mut moments = FeatureMoments::new(model.features.n_features());
    let mut counts = vec![0u64; k];
    let mut writers = MapWriters::create(out_dir, stem, (w, h), &model.classes, opts, tags)?;
    let (read, written) = std::thread::scope(|scope| {
        let (tx, rx) = sync_channel::<(RasterImage, Prediction)>(1);
        let writer = scope.spawn(move || -> Result<Vec<PathBuf>> {
            let mut rows = 0;
            for (image, prediction) in rx {
                writers.write_band(&image, &prediction)?;
                rows += image.height;
            }
            // Fewer rows means the reading side stopped on an error, which it reports;
            // dropping the writers removes their temporaries.
            if rows < h {
                return Ok(Vec::new());
            }
            writers.finish()
        });
        let mut band_of = |band: &crate::tiling::Band| -> Result<(RasterImage, Prediction)> {
            let pixels = reader.rows(band.window.y, band.window.height)?;
            let probs = predict_band(model, &pixels, band, w, h, Some(&mut moments));
            let core = pixels.crop(&Rect {
                y: band.core.y - band.window.y,
                ..band.core
            });
            let prediction = Prediction::from(probs);
            let mask = roi
                .as_mut()
                .map(|m| m.next_rows(band.core.height))
                .transpose()?;
            let band_counts = count_classes(&prediction.labels, k, mask.as_deref());
            counts
                .iter_mut()
                .zip(band_counts)
                .for_each(|(t, n)| *t += n);
            Ok((core, prediction))
        };
        let mut read = Ok(());
        for band in grid.bands() {
            match band_of(&band) {
                Ok(done) => {
                    if tx.send(done).is_err() {
                        break; // the writer stopped on an error, which join reports
                    }
                }
                Err(e) => {
                    read = Err(e);
                    break;
                }
            }
            on_rows(band.core.y + band.core.height, h);
        }
        drop(tx);
        let written = writer.join().expect("the map writer does not panic");
        (read, written)
    });
    read?;
    Ok(Streamed {
        width: w,
        height: h,
        counts,
        files: written?,
        moments,
    })
}

//! One image segmented as a stream, for images too large to hold: rows are read band by band
//! (one row of tiles plus the halo rows, [`BandReader`]), predicted tile by tile
//! ([`predict_band`], bit-identical to the whole image), and every map is written as it goes
//! ([`MapWriters`]), on a second thread so PNG encoding overlaps the next band's prediction.
//! With smoothing on, a band's tiles are smoothed ([`TiledSmoother`]) once the next band's
//! probabilities supply the rows below its halo, with the whole image's contrast β from a
//! first, cheap pass over the rows ([`streamed_beta`]).
//! The image, its feature stack, its probabilities and its maps never exist whole: memory is
//! bounded by the tile size times the image width.
//!
//! The files, area counts and drift moments are those of the whole-image path with the same
//! tile size, smoothing on or off (`tests/streaming.rs` compares them byte for byte).

use std::collections::VecDeque;
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
use crate::smooth::tiles::{TiledSmoother, SMOOTH_HALO};
use crate::smooth::{ContrastSum, SmoothMethod, SmoothSettings};
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

/// Rows read at a time by [`streamed_beta`].
const BETA_CHUNK_ROWS: usize = 256;

/// The contrast β of the image `source` delivers, in the model's colour mode, read a few rows
/// at a time: the value, to the bit, that the whole-image path computes from the whole image.
pub fn streamed_beta(model: &Segmenter, mut source: Box<dyn RowSource>) -> Result<f32> {
    let (w, h) = (source.width(), source.height());
    let mut sum = ContrastSum::default();
    let mut y = 0;
    while y < h {
        let n = BETA_CHUNK_ROWS.min(h - y);
        let mut rows = vec![Vec::new(); source.channels()];
        source.read_rows(n, &mut rows)?;
        let image = RasterImage {
            width: w,
            height: n,
            channels: rows
                .into_iter()
                .map(|d| crate::plane::Plane::from_vec(w, n, d))
                .collect(),
        };
        sum.push(&model.features.lab(&image));
        y += n;
    }
    Ok(sum.beta())
}

/// Smoothing of a streamed image: validated settings (not `none`) and the whole image's β
/// ([`streamed_beta`]).
pub struct StreamSmoothing {
    pub settings: SmoothSettings,
    pub beta: f32,
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
/// `out_dir` as they are made (TIFF maps with `tags`), smoothed when `smoothing` is given;
/// `roi` restricts the counts. `on_rows(done, total)` is told after every band how many rows
/// are finished.
#[allow(clippy::too_many_arguments)]
pub fn segment_streamed(
    model: &Segmenter,
    source: Box<dyn RowSource>,
    out_dir: &Path,
    stem: &str,
    tile: usize,
    smoothing: Option<StreamSmoothing>,
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
        let mut smoother = smoothing
            .filter(|s| s.settings.method != SmoothMethod::None)
            .map(|s| TiledSmoother::new(&s.settings, s.beta, (w, h), k, tile, SMOOTH_HALO));
        // Input rows of the bands the smoother has not finished yet (for the overlays).
        let mut pending: VecDeque<RasterImage> = VecDeque::new();
        let mut band_of = |band: &crate::tiling::Band| -> Result<Vec<(RasterImage, Prediction)>> {
            let pixels = reader.rows(band.window.y, band.window.height)?;
            let probs = predict_band(model, &pixels, band, w, h, Some(&mut moments));
            let core = pixels.crop(&Rect {
                y: band.core.y - band.window.y,
                ..band.core
            });
            drop(pixels);
            let done: Vec<(RasterImage, Prediction)> = match &mut smoother {
                None => vec![(core, Prediction::from(probs))],
                Some(s) => {
                    let lab = model.features.lab(&core);
                    pending.push_back(core);
                    s.push(&lab, &probs)
                        .into_iter()
                        .map(|r| {
                            let rows = pending.pop_front().expect("one input band per band");
                            assert_eq!(rows.height, r.probabilities.height);
                            let prediction = Prediction {
                                labels: r.labels,
                                probabilities: r.probabilities,
                            };
                            (rows, prediction)
                        })
                        .collect()
                }
            };
            for (rows, prediction) in &done {
                let mask = roi.as_mut().map(|m| m.next_rows(rows.height)).transpose()?;
                let band_counts = count_classes(&prediction.labels, k, mask.as_deref());
                counts
                    .iter_mut()
                    .zip(band_counts)
                    .for_each(|(t, n)| *t += n);
            }
            Ok(done)
        };
        let mut read = Ok(());
        let mut rows_done = 0;
        'bands: for band in grid.bands() {
            match band_of(&band) {
                Ok(done) => {
                    for item in done {
                        rows_done += item.0.height;
                        if tx.send(item).is_err() {
                            break 'bands; // the writer stopped on an error, which join reports
                        }
                        on_rows(rows_done, h);
                    }
                }
                Err(e) => {
                    read = Err(e);
                    break;
                }
            }
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

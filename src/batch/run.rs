//! The batch driver of `apply`: skips images whose outputs are complete, predicts the
//! others one after the other, writes their outputs and resume records, and counts the
//! class areas of every image (from the records for the skipped ones).
//!
//! Encoding the PNGs of one image overlaps the decoding and prediction of the next: PNG
//! coding is single-threaded, prediction uses every core. Images above
//! [`stream_above_pixels`] are streamed instead when tiling is on ([`super::streamed`]): never
//! decoded whole, written band by band, with the same files, counts and records, smoothing
//! on or off.

use std::collections::HashMap;
use std::path::PathBuf;
use std::sync::mpsc::sync_channel;
use std::time::Instant;

use crate::batch::record::{ImageRecord, Records};
use crate::batch::shard::Shard;
use crate::batch::streamed::{
    segment_streamed, stream_above_pixels, streamed_beta, StreamSmoothing, Streamed,
};
use crate::dataset::stem_of;
use crate::error::Result;
use crate::eval::areas::{count_classes, AreaTable, RoiMasks};
use crate::imageio::stream::{open_streamable, RowSource};
use crate::imageio::tiff_tags::TiffTag;
use crate::imageio::{read_image, RasterImage};
use crate::outputs::{pass_through_tags, write_outputs, OutputOptions};
use crate::prediction::Prediction;
use crate::segmenter::Segmenter;
use crate::smooth::SmoothSettings;

/// One run of `apply` over a list of images (already restricted to this shard).
pub struct BatchJob<'a> {
    pub model: &'a Segmenter,
    /// SHA-256 of the model file, recorded beside the outputs.
    pub model_sha256: String,
    pub images: Vec<PathBuf>,
    pub out_dir: PathBuf,
    pub options: OutputOptions,
    /// Recorded in the records and log lines when the run is one shard of several.
    pub shard: Option<Shard>,
    /// Redo every image even when its outputs are complete.
    pub force: bool,
    /// Count areas only inside these masks.
    pub roi: Option<&'a RoiMasks>,
    /// Tile side for prediction (`tiling::predict_tiled`; 0 = whole image).
    pub tile: usize,
    /// Pairwise smoothing of every map (validated).
    pub smoothing: SmoothSettings,
}

/// What the driver reports while it runs (for progress bars and `--log-json`).
#[derive(Debug)]
pub enum BatchEvent<'a> {
    /// These images already have complete outputs from the same model; not redone.
    Skipping(&'a [ImageRecord]),
    /// An image's outputs and record are written.
    Done(&'a ImageRecord),
    /// Something the user should know that does not stop the run.
    Warning(String),
    /// `rows` of the `height` rows of a streamed image are finished (sent now and then; some
    /// may be dropped while the writer is busy).
    Rows {
        image: &'a std::path::Path,
        rows: usize,
        height: usize,
    },
}

/// Totals of one run.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct BatchSummary {
    pub done: usize,
    pub skipped: usize,
    /// Pixels of the images done (not of the skipped ones).
    pub pixels: u64,
    pub seconds: f64,
}

enum Work {
    Warning(String),
    /// Predicted whole; its maps are still to be written.
    Image {
        path: PathBuf,
        image: RasterImage,
        prediction: Prediction,
        /// Passed on to TIFF maps.
        tags: Vec<TiffTag>,
        started: Instant,
    },
    /// Streamed: its maps are written, its record is not.
    Streamed {
        path: PathBuf,
        streamed: Streamed,
        started: Instant,
    },
    Rows {
        path: PathBuf,
        rows: usize,
        height: usize,
    },
}

impl BatchJob<'_> {
    /// The resume records of this job's output folder, model and settings.
    pub fn records(&self) -> Records {
        // What makes the outputs and counts differ: the maps asked for, the ROI folder
        // (masks edited in place are not noticed: --force) and the smoothing.
        let options = serde_json::json!({
            "outputs": self.options,
            "roi": self.roi.map(|r| r.dir().display().to_string()),
            "smoothing": self.smoothing,
        });
        Records::new(&self.out_dir, &self.model_sha256, options)
    }

    /// Splits the images into those to do and the records of those already complete.
    pub fn plan(&self) -> (Vec<PathBuf>, Vec<ImageRecord>) {
        let records = self.records();
        let mut todo = Vec::new();
        let mut complete = Vec::new();
        for path in &self.images {
            match records.complete(&stem_of(path)).filter(|_| !self.force) {
                Some(rec) => complete.push(rec),
                None => todo.push(path.clone()),
            }
        }
        (todo, complete)
    }

    /// Runs the job and adds every image's class counts to `areas`, in the order of
    /// `images` (so a resumed run writes the same table as a fresh one); `on_event` is
    /// called from one thread at a time, in order.
    pub fn run(
        &self,
        areas: &mut AreaTable,
        mut on_event: impl FnMut(BatchEvent) + Send,
    ) -> Result<BatchSummary> {
        let t0 = Instant::now();
        let records = self.records();
        let (todo, complete) = self.plan();
        if !complete.is_empty() {
            on_event(BatchEvent::Skipping(&complete));
        }
        let shard = self.shard.map(|s| s.to_string());
        let mut summary = BatchSummary {
            skipped: complete.len(),
            ..BatchSummary::default()
        };
        let model = self.model;
        let mut counts: HashMap<String, Vec<u64>> = complete
            .iter()
            .map(|r| {
                (
                    stem_of(std::path::Path::new(&r.image)),
                    r.class_pixels.clone(),
                )
            })
            .collect();
        std::thread::scope(|scope| -> Result<()> {
            let (tx, rx) = sync_channel::<Work>(1);
            let summary = &mut summary;
            let counts = &mut counts;
            let writer = scope.spawn(move || -> Result<()> {
                for work in rx {
                    let (path, files, (width, height), class_pixels, started, streamed) = match work
                    {
                        Work::Warning(w) => {
                            on_event(BatchEvent::Warning(w));
                            continue;
                        }
                        Work::Rows { path, rows, height } => {
                            on_event(BatchEvent::Rows {
                                image: &path,
                                rows,
                                height,
                            });
                            continue;
                        }
                        Work::Image {
                            path,
                            image,
                            prediction,
                            tags,
                            started,
                        } => {
                            let stem = stem_of(&path);
                            let written = write_outputs(
                                &self.out_dir,
                                &stem,
                                &image,
                                &prediction,
                                &model.classes,
                                &self.options,
                                &tags,
                            )?;
                            let size = (image.width, image.height);
                            let mask = match self.roi {
                                Some(r) => Some(r.mask(&stem, size.0, size.1)?),
                                None => None,
                            };
                            let k = model.classes.len();
                            let counts = count_classes(&written.index, k, mask.as_deref());
                            (path, written.files, size, counts, started, false)
                        }
                        Work::Streamed {
                            path,
                            streamed: s,
                            started,
                        } => (path, s.files, (s.width, s.height), s.counts, started, true),
                    };
                    let stem = stem_of(&path);
                    let pixels = (width * height) as u64;
                    let secs = started.elapsed().as_secs_f64();
                    let mut rec = records.make(
                        &path,
                        &files,
                        pixels,
                        class_pixels.clone(),
                        secs,
                        shard.clone(),
                    );
                    rec.streamed = streamed;
                    records.write(&stem, &rec)?;
                    counts.insert(stem, class_pixels);
                    summary.done += 1;
                    summary.pixels += pixels;
                    on_event(BatchEvent::Done(&rec));
                }
                Ok(())
            });
            let mut predicted = Ok(());
            let mut warned = false;
            let mut unlike = 0usize;
            for path in todo {
                let started = Instant::now();
                let work = match self.predict(&path, &tx, &mut warned, &mut unlike) {
                    Ok(Some(w)) => w,
                    Ok(None) => break, // the writer stopped on an error, which join reports
                    Err(e) => {
                        predicted = Err(e);
                        break;
                    }
                };
                let work = match work {
                    Done::Whole(image, prediction, tags) => Work::Image {
                        path,
                        image,
                        prediction,
                        tags,
                        started,
                    },
                    Done::Streamed(streamed) => Work::Streamed {
                        path,
                        streamed,
                        started,
                    },
                };
                if tx.send(work).is_err() {
                    break; // the writer stopped on an error, which join reports
                }
            }
            drop(tx);
            let written = writer.join().expect("the output writer does not panic");
            predicted.and(written)
        })?;
        for path in &self.images {
            let stem = stem_of(path);
            if let Some(c) = counts.get(&stem) {
                areas.add_counts(&stem, c);
            }
        }
        summary.seconds = t0.elapsed().as_secs_f64();
        Ok(summary)
    }
}

/// One image predicted by the main loop of [`BatchJob::run`].
enum Done {
    /// Whole: the maps are for the writer thread to write.
    Whole(RasterImage, Prediction, Vec<TiffTag>),
    /// Streamed: maps already written.
    Streamed(Streamed),
}

impl BatchJob<'_> {
    /// The streamed reader of `path` when this image is to be streamed: tiling is on, the
    /// format can be read in pieces and the image is above [`stream_above_pixels`].
    fn stream_source(&self, path: &std::path::Path) -> Result<Option<Box<dyn RowSource>>> {
        if self.tile == 0 {
            return Ok(None);
        }
        // A file the streaming readers cannot open is left to the whole-image path, which
        // checks its header against the size limit and words damage the same way for all
        // formats.
        let Some(source) = open_streamable(path)
            .ok()
            .flatten()
            .filter(|s| s.width() * s.height() > stream_above_pixels())
        else {
            return Ok(None);
        };
        let (w, h) = (source.width() as u64, source.height() as u64);
        crate::image_check::check_streamed_size(path, w, h)?;
        Ok(Some(source))
    }

    /// Predicts one image, whole or streamed, sending its warnings and progress to `tx`.
    /// `Ok(None)`: the writer has stopped.
    fn predict(
        &self,
        path: &std::path::Path,
        tx: &std::sync::mpsc::SyncSender<Work>,
        warned: &mut bool,
        unlike: &mut usize,
    ) -> Result<Option<Done>> {
        let model = self.model;
        // The colour warning comes before the work, which may take minutes.
        let mut colour = |grey: bool| {
            if *warned || grey == (model.features.channels == 1) {
                return true;
            }
            *warned = true;
            tx.send(Work::Warning(colour_mismatch(path, grey))).is_ok()
        };
        // Read before the work, so a damaged TIFF directory fails in seconds, not after it.
        let tags = pass_through_tags(path, &self.options)?;
        let (done, size, moments) = match self.stream_source(path)? {
            Some(source) => {
                if !colour(source.channels() == 1) {
                    return Ok(None);
                }
                let stem = stem_of(path);
                let (w, h) = (source.width(), source.height());
                let roi = self.roi.map(|r| r.rows(&stem, w, h)).transpose()?;
                let on_rows = |rows, height| {
                    // Progress only: dropped when the writer is busy.
                    let _ = tx.try_send(Work::Rows {
                        path: path.to_path_buf(),
                        rows,
                        height,
                    });
                };
                let smoothing = match self.smoothing.method {
                    crate::smooth::SmoothMethod::None => None,
                    _ => {
                        // A first pass over the rows for β; `stream_source` opened the file
                        // once already, so it is streamable.
                        let again = open_streamable(path)?.ok_or_else(|| {
                            crate::error::GroveError::input(path, "changed while being read")
                        })?;
                        Some(StreamSmoothing {
                            settings: self.smoothing.clone(),
                            beta: streamed_beta(model, again)?,
                        })
                    }
                };
                let s = segment_streamed(
                    model,
                    source,
                    &self.out_dir,
                    &stem,
                    self.tile,
                    smoothing,
                    &self.options,
                    &tags,
                    roi,
                    on_rows,
                )?;
                let moments = s.moments.clone();
                (Done::Streamed(s), (w, h), moments)
            }
            None => {
                let image = read_image(path)?;
                if !colour(image.is_grey()) {
                    return Ok(None);
                }
                let (probs, moments) =
                    crate::tiling::predict_tiled_moments(model, &image, self.tile);
                let prediction = model
                    .smooth_all(
                        &image,
                        probs,
                        self.tile,
                        std::slice::from_ref(&self.smoothing),
                    )
                    .remove(0);
                let size = (image.width, image.height);
                (Done::Whole(image, prediction, tags), size, moments)
            }
        };
        if let Some(w) = unlike_training(model, path, size, &moments, unlike) {
            if tx.send(Work::Warning(w)).is_err() {
                return Ok(None);
            }
        }
        Ok(Some(done))
    }
}
/// Images unlike the training images get a warning each, up to [`MAX_UNLIKE_WARNINGS`]
/// (a night's batch of one new camera should not bury the rest of the output).
const MAX_UNLIKE_WARNINGS: usize = 20;

fn unlike_training(
    model: &Segmenter,
    path: &std::path::Path,
    (width, height): (usize, usize),
    moments: &crate::eval::drift::FeatureMoments,
    count: &mut usize,
) -> Option<String> {
    let profile = model.profile.as_ref()?;
    let why = profile.differences(width, height, moments, &model.features.names());
    if why.is_empty() {
        return None;
    }
    *count += 1;
    match *count {
        n if n < MAX_UNLIKE_WARNINGS => Some(format!(
            "{} is unlike the training images: {}; its map may be poor (label a few such images and add them to training, or check the map with grove eval)",
            path.display(),
            why.join("; ")
        )),
        MAX_UNLIKE_WARNINGS => Some(format!(
            "{} is unlike the training images too; no more such warnings in this run",
            path.display()
        )),
        _ => None,
    }
}

fn colour_mismatch(path: &std::path::Path, image_is_grey: bool) -> String {
    let (model_kind, image_kind) = if image_is_grey {
        ("colour", "grey")
    } else {
        ("grey", "colour")
    };
    format!(
        "{}: {image_kind} image, but the model was trained on {model_kind} images; results may be poor (train on images like the ones you apply to)",
        path.display()
    )
}

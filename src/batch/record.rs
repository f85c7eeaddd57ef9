//! Resume records: `DIR/done/STEM.json`, one per finished image of `apply`.
//!
//! A record is written (atomically) only after every output file of its image has been
//! renamed into place, and outputs are themselves written by rename, so a record that
//! exists means whole outputs. It holds the SHA-256 of the model file and the output
//! settings; a re-run skips an image only when both match and every listed output file
//! still exists, so a retrained model, a changed `--opacity` or a deleted overlay makes it
//! redo that image. Per-image files rather than one manifest because the processes of a
//! job array may share an output folder, and separate files need no locking.
//!
//! The same fields, with a status, are what `--log-json` prints per image.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::error::Result;
use crate::imageio::{output_path, write_atomic};

/// Folder of the records, inside the output folder.
pub const RECORD_DIR: &str = "done";

/// What was made from one input image.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ImageRecord {
    /// "written by grove VERSION": marks the file as grove's own (see `output_guard`).
    pub generator: String,
    /// The input image, as it was named on the command line or in the list.
    pub image: String,
    /// Output files, relative to the output folder.
    pub outputs: Vec<String>,
    pub pixels: u64,
    /// Counted pixels per class index (inside the ROI when there is one), so a resumed run
    /// can rebuild `areas.csv` without reading the label maps again.
    pub class_pixels: Vec<u64>,
    /// Wall time from reading the image to its last output.
    pub seconds: f64,
    /// `K/N` when run with `--shard`.
    pub shard: Option<String>,
    /// Read, predicted and written band by band (a large image, see `batch::streamed`)
    /// rather than whole; the outputs are the same either way.
    #[serde(default)]
    pub streamed: bool,
    /// SHA-256 of the model file that made the outputs.
    pub model_sha256: String,
    /// The output settings (which maps, overlay opacity, ...).
    pub options: serde_json::Value,
}

/// The records of one output folder, for one model and one set of output settings.
#[derive(Clone, Debug)]
pub struct Records {
    out_dir: PathBuf,
    model_sha256: String,
    options: serde_json::Value,
}

impl Records {
    pub fn new(out_dir: &Path, model_sha256: &str, options: serde_json::Value) -> Self {
        Records {
            out_dir: out_dir.to_path_buf(),
            model_sha256: model_sha256.to_string(),
            options,
        }
    }

    pub fn path(&self, stem: &str) -> PathBuf {
        output_path(&self.out_dir.join(RECORD_DIR), stem, "json")
    }

    /// The record of `stem` when its outputs are complete and were made by this model with
    /// these settings; `None` means the image has to be (re)done.
    pub fn complete(&self, stem: &str) -> Option<ImageRecord> {
        let text = std::fs::read_to_string(self.path(stem)).ok()?;
        let rec: ImageRecord = serde_json::from_str(&text).ok()?;
        let matches = rec.model_sha256 == self.model_sha256
            && rec.options == self.options
            && !rec.outputs.is_empty()
            && rec.outputs.iter().all(|o| self.out_dir.join(o).is_file());
        matches.then_some(rec)
    }

    /// The outputs an earlier run of grove recorded for `stem`, whatever its model or
    /// settings: files grove wrote even when they cannot say so themselves (`.npy` arrays
    /// have no room for a signature, see `output_guard`).
    pub fn recorded_outputs(&self, stem: &str) -> Vec<PathBuf> {
        let Ok(text) = std::fs::read_to_string(self.path(stem)) else {
            return Vec::new();
        };
        match serde_json::from_str::<ImageRecord>(&text) {
            Ok(rec) if rec.generator.starts_with(crate::output_guard::SIGNATURE) => {
                rec.outputs.iter().map(|o| self.out_dir.join(o)).collect()
            }
            _ => Vec::new(),
        }
    }

    /// A record for outputs just written (absolute or relative to the working directory).
    pub fn make(
        &self,
        image: &Path,
        outputs: &[PathBuf],
        pixels: u64,
        class_pixels: Vec<u64>,
        seconds: f64,
        shard: Option<String>,
    ) -> ImageRecord {
        ImageRecord {
            generator: crate::output_guard::generator(),
            image: image.display().to_string(),
            outputs: outputs
                .iter()
                .map(|p| {
                    p.strip_prefix(&self.out_dir)
                        .unwrap_or(p)
                        .display()
                        .to_string()
                })
                .collect(),
            pixels,
            class_pixels,
            seconds,
            shard,
            streamed: false,
            model_sha256: self.model_sha256.clone(),
            options: self.options.clone(),
        }
    }

    /// Writes the record; call only once every output it lists is in place.
    pub fn write(&self, stem: &str, record: &ImageRecord) -> Result<()> {
        let json = serde_json::to_vec_pretty(record).expect("a record always serialises");
        write_atomic(&self.path(stem), &json)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn complete_only_for_same_model_settings_and_present_outputs() {
        let t = tempfile::tempdir().unwrap();
        let out = t.path();
        let opts = serde_json::json!({"overlay": true});
        let recs = Records::new(out, "aa", opts.clone());
        assert!(recs.complete("x").is_none());
        let label = out.join("labels/x.png");
        write_atomic(&label, b"png").unwrap();
        let rec = recs.make(
            Path::new("in/x.png"),
            std::slice::from_ref(&label),
            4,
            vec![3, 1],
            0.5,
            None,
        );
        assert_eq!(rec.outputs, ["labels/x.png"]);
        recs.write("x", &rec).unwrap();
        assert_eq!(recs.complete("x"), Some(rec));
        assert!(Records::new(out, "bb", opts.clone())
            .complete("x")
            .is_none());
        let other = serde_json::json!({"overlay": false});
        assert!(Records::new(out, "aa", other).complete("x").is_none());
        std::fs::remove_file(&label).unwrap();
        assert!(recs.complete("x").is_none());
    }
}

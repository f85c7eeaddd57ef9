//! A dataset folder: `images/` (PNG, JPEG, TIFF), `labels/` (PNG or TIFF, same file stem) and
//! `classes.toml`. Images without a label file are allowed (they are only applied to).

pub mod classes;
pub mod labels;
pub mod sample;
pub mod save;

use std::path::{Path, PathBuf};

pub use classes::{ClassInfo, ClassTable};
pub use labels::{read_labels_for, LabelMap, LabelOptions, UNLABELLED};

use crate::error::{GroveError, Result};
use crate::imageio::{has_image_extension, probe_image, read_image, ImageHeader, RasterImage};

/// One image of a dataset and its label file, if any.
#[derive(Clone, Debug)]
pub struct ImageEntry {
    pub stem: String,
    pub image: PathBuf,
    pub labels: Option<PathBuf>,
}

/// Label file extensions, in the order they are looked for.
const LABEL_EXTENSIONS: [&str; 3] = ["png", "tif", "tiff"];

/// An opened dataset folder (class table read and validated, files paired by stem).
#[derive(Clone, Debug)]
pub struct Dataset {
    pub root: PathBuf,
    /// `root/classes.toml`.
    pub table_path: PathBuf,
    pub classes: ClassTable,
    pub entries: Vec<ImageEntry>,
    pub label_options: LabelOptions,
    /// Things worth telling the user that do not stop the run.
    pub warnings: Vec<String>,
}

/// Image files in `dir` (not recursive), sorted by file name so runs are reproducible.
/// grove's own temporary files are never listed; a name that is not valid UTF-8 is refused
/// (rather than dropped or renamed), because names pair images with labels and name outputs.
pub fn list_images(dir: &Path) -> Result<Vec<PathBuf>> {
    let rd = std::fs::read_dir(dir).map_err(|e| GroveError::io(dir, e))?;
    let mut files = Vec::new();
    for entry in rd {
        let path = entry.map_err(|e| GroveError::io(dir, e))?.path();
        let Some(name) = path.file_name() else {
            continue;
        };
        if crate::atomic_write::is_temp_name(name) {
            continue;
        }
        if path.is_file() && has_image_extension(&path) {
            check_utf8_name(&path)?;
            files.push(path);
        }
    }
    files.sort();
    Ok(files)
}

/// Refuses a file name that is not valid UTF-8, with the name as far as it can be shown.
pub fn check_utf8_name(path: &Path) -> Result<()> {
    if path.file_name().is_some_and(|n| n.to_str().is_none()) {
        return Err(GroveError::input(
            path,
            "file name is not valid UTF-8 (shown with \u{FFFD} for the undecodable bytes); rename the file (and its label file) with a UTF-8 name",
        ));
    }
    Ok(())
}

/// The file stem as UTF-8 (lossy: names are for display and pairing).
pub fn stem_of(path: &Path) -> String {
    path.file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default()
}

impl Dataset {
    /// Opens `root`, reading `classes.toml` and pairing `images/X.*` with `labels/X.png` (or
    /// `labels/X.tif`, `labels/X.tiff`).
    pub fn open(root: &Path, label_options: LabelOptions) -> Result<Dataset> {
        let images_dir = root.join("images");
        if !images_dir.is_dir() {
            return Err(GroveError::input(
                root,
                "not a grove dataset: expected an images/ folder (plus labels/ and classes.toml)",
            ));
        }
        let table_path = root.join("classes.toml");
        if table_path.is_dir() {
            return Err(GroveError::input(
                &table_path,
                "is a folder; the class table must be a TOML file with one [[class]] entry (id, name, color) per class",
            ));
        }
        if !table_path.is_file() {
            return Err(GroveError::input(
                &table_path,
                "missing class table; create it with one [[class]] entry (id, name, color) per class",
            ));
        }
        let classes = ClassTable::load(&table_path, label_options.unlabelled_value)?;
        let labels_dir = root.join("labels");
        let mut warnings = Vec::new();
        let mut entries: Vec<ImageEntry> = Vec::new();
        for image in list_images(&images_dir)? {
            let stem = stem_of(&image);
            if let Some(prev) = entries.iter().find(|e| e.stem == stem) {
                return Err(GroveError::input(
                    &image,
                    format!(
                        "two images share the name '{stem}' ({}); rename one",
                        prev.image.display()
                    ),
                ));
            }
            // PNG first; a TIFF (such as a corrected `--map-format tiff` label map) otherwise.
            let label = LABEL_EXTENSIONS
                .iter()
                .map(|ext| labels_dir.join(format!("{stem}.{ext}")))
                .find(|p| p.is_file());
            entries.push(ImageEntry {
                stem,
                image,
                labels: label,
            });
        }
        if entries.is_empty() {
            return Err(GroveError::input(
                &images_dir,
                "no images (PNG, JPEG or TIFF) found",
            ));
        }
        if labels_dir.is_dir() {
            for label in list_images(&labels_dir)? {
                let stem = stem_of(&label);
                let lossless = label
                    .extension()
                    .is_some_and(|e| LABEL_EXTENSIONS.iter().any(|ok| e.eq_ignore_ascii_case(ok)));
                let used = entries
                    .iter()
                    .any(|e| e.labels.as_deref() == Some(label.as_path()));
                if !lossless {
                    warnings.push(format!(
                        "{}: label files must be PNG or TIFF (lossy formats change class values); ignored",
                        label.display()
                    ));
                } else if !used && entries.iter().any(|e| e.stem == stem) {
                    warnings.push(format!(
                        "{}: another label file of this image comes first (PNG, then .tif, then .tiff); ignored",
                        label.display()
                    ));
                } else if !entries.iter().any(|e| e.stem == stem) {
                    warnings.push(format!(
                        "{}: label file has no matching image; ignored",
                        label.display()
                    ));
                }
            }
        }
        Ok(Dataset {
            root: root.to_path_buf(),
            table_path,
            classes,
            entries,
            label_options,
            warnings,
        })
    }

    /// Every file of the dataset grove reads (class table, images, label files): what an
    /// output must never replace.
    pub fn files(&self) -> impl Iterator<Item = &Path> {
        self.entries
            .iter()
            .flat_map(|e| std::iter::once(e.image.as_path()).chain(e.labels.as_deref()))
            .chain(std::iter::once(self.table_path.as_path()))
    }

    /// Entries that have a label file.
    pub fn labelled(&self) -> Vec<&ImageEntry> {
        self.entries.iter().filter(|e| e.labels.is_some()).collect()
    }

    /// Reads an entry's image and labels, checking that their sizes agree.
    pub fn load_pair(&self, entry: &ImageEntry) -> Result<(RasterImage, LabelMap)> {
        let image = read_image(&entry.image)?;
        let labels = self.labels_of_size(entry, (image.width, image.height))?;
        Ok((image, labels))
    }

    /// Reads an entry's labels and checks them against the image header, without decoding
    /// the image's pixels.
    pub fn load_labels_checked(&self, entry: &ImageEntry) -> Result<(ImageHeader, LabelMap)> {
        let header = probe_image(&entry.image)?;
        let labels = self.labels_of_size(entry, (header.width, header.height))?;
        Ok((header, labels))
    }

    /// The entry's labels, which must cover an image of `size` (width, height).
    fn labels_of_size(&self, entry: &ImageEntry, size: (usize, usize)) -> Result<LabelMap> {
        let label_path = entry
            .labels
            .as_ref()
            .ok_or_else(|| GroveError::input(&entry.image, "image has no label file"))?;
        read_labels_for(label_path, &self.classes, &self.label_options, size).map_err(|e| match e {
            GroveError::Input { path, message } => {
                GroveError::input(path, format!("{message} ({})", entry.image.display()))
            }
            other => other,
        })
    }

    pub fn read_labels(&self, path: &Path) -> Result<LabelMap> {
        labels::read_labels(path, &self.classes, &self.label_options)
    }

    /// Checks that the given label counts can train a segmenter: some labelled pixels and at
    /// least two classes; classes of the table without pixels become warnings.
    pub fn check_counts(&self, counts: &[u64]) -> Result<Vec<String>> {
        let total: u64 = counts.iter().sum();
        if total == 0 {
            return Err(GroveError::Data(format!(
                "{}: no labelled pixels in any label file; draw at least a few strokes per class",
                self.root.display()
            )));
        }
        let present: Vec<&str> = self
            .classes
            .classes()
            .iter()
            .zip(counts)
            .filter(|(_, &n)| n > 0)
            .map(|(c, _)| c.name.as_str())
            .collect();
        if present.len() < 2 {
            return Err(GroveError::Data(format!(
                "{}: only class '{}' has labelled pixels; label at least two classes so there is something to separate",
                self.root.display(),
                present[0]
            )));
        }
        Ok(self
            .classes
            .classes()
            .iter()
            .zip(counts)
            .filter(|(_, &n)| n == 0)
            .map(|(c, _)| {
                format!(
                    "{}: class '{}' (id {}) has no labelled pixels; the model will never predict it",
                    self.root.display(),
                    c.name,
                    c.id
                )
            })
            .collect())
    }
}

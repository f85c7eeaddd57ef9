//! Writing label maps back into a dataset (the workspace's painted scribbles, or any program
//! that edits labels): as ordinary grove label files, atomically, with the version being
//! replaced kept in a small per-image history, and refusing a write based on a stale version
//! (two editors on one image), so that nothing a person labelled is ever silently lost.
//!
//! Layout: `DATA/labels/NAME.png` (palette PNG: value = class id, 255/unlabelled value =
//! no label; the same file `grove apply` writes and every command reads) and
//! `DATA/.grove-history/NAME/<unix-ms>.png`, newest [`HISTORY_KEEP`] kept.

use std::path::{Path, PathBuf};

use sha2::{Digest, Sha256};

use crate::dataset::{ClassTable, LabelMap, LabelOptions, UNLABELLED};
use crate::error::{GroveError, Result};
use crate::imageio::write_label_png;

/// Earlier versions kept per image: enough to undo a few bad saves, small on disk
/// (scribble PNGs are a few kB).
pub const HISTORY_KEEP: usize = 20;

/// Folder (inside the dataset) holding earlier label versions.
pub const HISTORY_DIR: &str = ".grove-history";

/// A label file's version: a short hash of its bytes, or `"none"` when there is no file.
/// Content hashes (not modification times) so that a copy restored by hand still matches.
pub fn label_version(path: &Path) -> Result<String> {
    match std::fs::read(path) {
        Ok(bytes) => Ok(version_of(&bytes)),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok("none".into()),
        Err(e) => Err(GroveError::io(path, e)),
    }
}

fn version_of(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .take(8)
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The result of [`save_labels`].
#[derive(Debug, PartialEq, Eq)]
pub enum SaveOutcome {
    /// Written; the new version.
    Saved(String),
    /// Not written: the file on disk is at `current`, not at the version the edit started
    /// from (someone else saved in between).
    Stale { current: String },
}

/// Path of the label file of image `stem`.
pub fn label_path(root: &Path, stem: &str) -> PathBuf {
    root.join("labels").join(format!("{stem}.png"))
}

/// Writes `map` (class indices, [`UNLABELLED`] = no label) as the label file of `stem`, if the
/// file on disk is still at version `expected` (`None` = write whatever is there). The file it
/// replaces goes to the history first. Callers serialise saves to one dataset (the check and
/// the rename are not one atomic step across processes).
pub fn save_labels(
    root: &Path,
    stem: &str,
    map: &LabelMap,
    classes: &ClassTable,
    options: &LabelOptions,
    expected: Option<&str>,
) -> Result<SaveOutcome> {
    let path = label_path(root, stem);
    let current = label_version(&path)?;
    if let Some(e) = expected {
        if e != current {
            return Ok(SaveOutcome::Stale { current });
        }
    }
    let n = classes.len();
    let mut ids = Vec::with_capacity(map.indices.len());
    for &c in &map.indices {
        if c == UNLABELLED {
            ids.push(options.unlabelled_value);
        } else if (c as usize) < n {
            ids.push(classes.classes()[c as usize].id);
        } else {
            return Err(GroveError::Data(format!(
                "{stem}: label map holds class index {c}; the table has {n} classes"
            )));
        }
    }
    if current != "none" {
        keep_in_history(root, stem, &path)?;
    }
    write_label_png(&path, map.width, map.height, &ids, &classes.palette())?;
    label_version(&path).map(SaveOutcome::Saved)
}

/// Writes the class table to `DATA/classes.toml`, keeping the file it replaces (which may be
/// hand-written, with comments) in `DATA/.grove-history/classes.toml/`.
pub fn save_class_table(root: &Path, table: &ClassTable) -> Result<()> {
    let path = root.join("classes.toml");
    if path.is_file() {
        keep_in_history(root, "classes.toml", &path)?;
    }
    table.save(&path)
}

/// Copies the current file into the history and trims the history to [`HISTORY_KEEP`].
fn keep_in_history(root: &Path, stem: &str, path: &Path) -> Result<()> {
    let dir = root.join(HISTORY_DIR).join(stem);
    let bytes = std::fs::read(path).map_err(|e| GroveError::io(path, e))?;
    let ms = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map(|d| d.as_millis())
        .unwrap_or(0);
    // Two saves in one millisecond must not overwrite each other's kept version.
    let ext = path.extension().and_then(|e| e.to_str()).unwrap_or("png");
    let mut target = dir.join(format!("{ms:015}.{ext}"));
    let mut k = 1;
    while target.exists() {
        target = dir.join(format!("{ms:015}-{k}.{ext}"));
        k += 1;
    }
    crate::imageio::write_atomic(&target, &bytes)?;
    let mut kept = history(root, stem)?;
    while kept.len() > HISTORY_KEEP {
        let old = kept.remove(0);
        std::fs::remove_file(&old).map_err(|e| GroveError::io(&old, e))?;
    }
    Ok(())
}

/// Earlier versions of `stem`'s label file (or of `classes.toml`), oldest first.
pub fn history(root: &Path, stem: &str) -> Result<Vec<PathBuf>> {
    let dir = root.join(HISTORY_DIR).join(stem);
    let rd = match std::fs::read_dir(&dir) {
        Ok(rd) => rd,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Vec::new()),
        Err(e) => return Err(GroveError::io(&dir, e)),
    };
    let mut files: Vec<PathBuf> = rd
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| {
            !p.file_name()
                .is_some_and(|n| n.to_string_lossy().starts_with(".grove-tmp"))
        })
        .collect();
    files.sort();
    Ok(files)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dataset::labels::read_labels;

    fn table() -> ClassTable {
        ClassTable::parse(
            "[[class]]\nid = 0\nname = \"a\"\ncolor = \"#ff0000\"\n[[class]]\nid = 7\nname = \"b\"\ncolor = \"#00ff00\"\n",
            255,
        )
        .unwrap()
    }

    #[test]
    fn saved_labels_read_back_and_history_keeps_the_old_version() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        let opts = LabelOptions::default();
        let map = LabelMap {
            width: 3,
            height: 1,
            indices: vec![0, UNLABELLED, 1],
        };
        let v1 = match save_labels(root, "x", &map, &table(), &opts, Some("none")).unwrap() {
            SaveOutcome::Saved(v) => v,
            s => panic!("{s:?}"),
        };
        let back = read_labels(&label_path(root, "x"), &table(), &opts).unwrap();
        assert_eq!(back, map);
        // A write from the stale "none" version is refused and changes nothing.
        let map2 = LabelMap {
            indices: vec![1, 1, 1],
            ..map.clone()
        };
        assert_eq!(
            save_labels(root, "x", &map2, &table(), &opts, Some("none")).unwrap(),
            SaveOutcome::Stale {
                current: v1.clone()
            }
        );
        assert!(matches!(
            save_labels(root, "x", &map2, &table(), &opts, Some(&v1)).unwrap(),
            SaveOutcome::Saved(_)
        ));
        let kept = history(root, "x").unwrap();
        assert_eq!(kept.len(), 1);
        assert_eq!(read_labels(&kept[0], &table(), &opts).unwrap(), map);
    }

    #[test]
    fn history_is_trimmed() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path();
        let opts = LabelOptions::default();
        for i in 0..(HISTORY_KEEP + 5) {
            let map = LabelMap {
                width: 2,
                height: 1,
                indices: vec![(i % 2) as u8, UNLABELLED],
            };
            save_labels(root, "y", &map, &table(), &opts, None).unwrap();
        }
        assert_eq!(history(root, "y").unwrap().len(), HISTORY_KEEP);
    }
}

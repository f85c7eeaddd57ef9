//! Where grove may write: the one check every command makes before it starts working.
//!
//! Rules (the same for every command, so other people's data is safe whatever the command):
//!
//! 1. An output is never one of the command's inputs (not even with `--force`): a prediction
//!    must not replace the hand-made label file it could be compared with.
//! 2. An existing file that grove did not write is never replaced without `--force` (a label
//!    file, a class table, an image, someone's notes). grove's own files say so: model files
//!    start with the model magic, and every other output carries [`SIGNATURE`] near its start
//!    (a PNG text chunk, a JSON key), see [`is_grove_file`].
//! 3. The place must be writable, checked before the work rather than after an hour of
//!    training: an existing folder is not a file, no part of the path is a file, and the
//!    nearest existing folder grants write permission.
//!
//! And output *names* never come straight from data: [`safe_file_name`] turns an image stem or
//! a class name into one path component (no separators, no `..`, no control characters).

use std::io::Read;
use std::path::{Component, Path, PathBuf};

use crate::error::{GroveError, Result};

/// Marks a file as grove's own output; placed within its first 4 KiB.
pub const SIGNATURE: &str = "written by grove";

/// "written by grove VERSION": the value of the `generator` key of grove's JSON files and of
/// the `Software` text of its PNGs.
pub fn generator() -> String {
    format!("{SIGNATURE} {}", env!("CARGO_PKG_VERSION"))
}

/// How far into a file [`is_grove_file`] looks for the signature.
const SNIFF_BYTES: usize = 4096;

/// The longest output name component kept (most file systems allow 255 bytes).
const MAX_NAME_BYTES: usize = 200;

/// True when `path` is a file grove wrote: a model file, an area table (by its header, see
/// [`crate::eval::areas::CSV_HEADER`]), or a file with [`SIGNATURE`] in its first 4 KiB.
pub fn is_grove_file(path: &Path) -> bool {
    let Ok(file) = std::fs::File::open(path) else {
        return false;
    };
    let mut head = Vec::with_capacity(SNIFF_BYTES);
    if file
        .take(SNIFF_BYTES as u64)
        .read_to_end(&mut head)
        .is_err()
    {
        return false;
    }
    let area_csv = crate::eval::areas::CSV_HEADER.as_bytes();
    head.starts_with(crate::model::MAGIC)
        || (head.starts_with(area_csv) && matches!(head.get(area_csv.len()), Some(b'\n' | b',')))
        || head
            .windows(SIGNATURE.len())
            .any(|w| w == SIGNATURE.as_bytes())
}

/// One safe path component from a name taken from data (image stem, class name): path
/// separators and control characters become `_`, a leading `.` gets a `_` in front (no
/// hidden files, no `..`), empty becomes `_`, and overlong names are cut at 200 bytes.
pub fn safe_file_name(name: &str) -> String {
    let mut s: String = name
        .chars()
        .map(|c| {
            if c == '/' || c == '\\' || c.is_control() {
                '_'
            } else {
                c
            }
        })
        .collect();
    if s.is_empty() || s.starts_with('.') {
        s.insert(0, '_');
    }
    if s.len() > MAX_NAME_BYTES {
        let mut cut = MAX_NAME_BYTES;
        while !s.is_char_boundary(cut) {
            cut -= 1;
        }
        s.truncate(cut);
    }
    s
}

/// The paths a command reads, and whether the user allowed replacing files that are not
/// grove's own.
#[derive(Clone, Debug)]
pub struct OutputGuard {
    /// Canonical paths of the inputs that exist.
    inputs: Vec<PathBuf>,
    force: bool,
}

impl OutputGuard {
    /// `inputs`: every file the command reads (model, images, label files, class table).
    pub fn new<'a>(inputs: impl IntoIterator<Item = &'a Path>, force: bool) -> Self {
        let mut inputs: Vec<PathBuf> = inputs
            .into_iter()
            .filter_map(|p| p.canonicalize().ok())
            .collect();
        inputs.sort();
        inputs.dedup();
        OutputGuard { inputs, force }
    }

    /// Checks that `path` may be written as an output file (rules 1–3 of the module docs).
    pub fn check_file(&self, path: &Path) -> Result<()> {
        if path.is_dir() {
            return Err(GroveError::output(
                path,
                "is a folder; give a file name for this output (are the arguments in the right order?)",
            ));
        }
        if path.exists() && !path.is_file() {
            return Err(GroveError::output(
                path,
                "is not a regular file (a device or pipe?); give a file name for this output",
            ));
        }
        let target = self.resolve(path)?;
        if self.inputs.binary_search(&target).is_ok() {
            return Err(GroveError::output(
                path,
                "is one of this command's inputs; grove never writes over its inputs, choose another output",
            ));
        }
        if path.exists() && !self.force && !is_grove_file(path) {
            return Err(GroveError::output(
                path,
                "exists and was not written by grove; refusing to replace it (choose another output, or pass --force to replace it)",
            ));
        }
        Ok(())
    }

    /// Checks that `dir` may be used (or created) as an output folder: not an input, not a
    /// file, and not a dataset folder (without `--force`).
    pub fn check_dir(&self, dir: &Path) -> Result<()> {
        if dir.exists() && !dir.is_dir() {
            return Err(GroveError::output(
                dir,
                "is a file, not a folder; give a folder for the outputs",
            ));
        }
        let target = self.resolve(dir)?;
        if self.inputs.binary_search(&target).is_ok() {
            return Err(GroveError::output(
                dir,
                "is one of this command's inputs; choose another output folder",
            ));
        }
        let table = dir.join("classes.toml");
        let dataset = dir.join("images").is_dir() || (table.is_file() && !is_grove_file(&table));
        if !self.force && dataset {
            return Err(GroveError::output(
                dir,
                "is a dataset folder (it has images/ or its own classes.toml); outputs there would mix predictions with your labels. Choose another output folder, or pass --force",
            ));
        }
        Ok(())
    }

    /// Checks that `dir` may be used as a folder grove fills with files of its own choosing
    /// (`grove demo`): [`Self::check_dir`], and every file already in it, at any depth, is
    /// grove's (without `--force`). Stops at the first foreign file, which it names.
    pub fn check_grove_folder(&self, dir: &Path) -> Result<()> {
        self.check_dir(dir)?;
        if self.force || !dir.is_dir() {
            return Ok(());
        }
        match first_foreign_file(dir) {
            Some(f) => Err(GroveError::output(
                dir,
                format!(
                    "holds {}, which grove did not write; give a new or empty folder (grove only replaces its own files there)",
                    f.display()
                ),
            )),
            None => Ok(()),
        }
    }

    /// The canonical form of a path that may not exist yet, after checking that it can be
    /// created: the nearest existing ancestor must be a writable folder.
    fn resolve(&self, path: &Path) -> Result<PathBuf> {
        if let Ok(c) = path.canonicalize() {
            if let Some(parent) = c.parent() {
                check_writable_dir(parent, path)?;
            }
            return Ok(c);
        }
        let mut rest: Vec<&std::ffi::OsStr> = Vec::new();
        let mut base = path;
        loop {
            let probe = if base.as_os_str().is_empty() {
                Path::new(".")
            } else {
                base
            };
            if probe.exists() {
                if !probe.is_dir() {
                    return Err(GroveError::output(
                        path,
                        format!(
                            "cannot be created: {} is a file, not a folder",
                            probe.display()
                        ),
                    ));
                }
                check_writable_dir(probe, path)?;
                let mut c = probe
                    .canonicalize()
                    .map_err(|e| GroveError::write(probe, e))?;
                for part in rest.iter().rev() {
                    c.push(part);
                }
                return Ok(c);
            }
            match (base.parent(), base.components().next_back()) {
                (Some(parent), Some(Component::Normal(name))) => {
                    rest.push(name);
                    base = parent;
                }
                _ => {
                    return Err(GroveError::output(
                        path,
                        "cannot be created (no existing folder above it)",
                    ))
                }
            }
        }
    }
}

/// The first file under `dir` (depth first) that grove did not write; grove's temporaries
/// and unreadable entries are skipped.
fn first_foreign_file(dir: &Path) -> Option<PathBuf> {
    let mut entries: Vec<_> = std::fs::read_dir(dir).ok()?.flatten().collect();
    entries.sort_by_key(|e| e.file_name());
    for e in entries {
        let path = e.path();
        let Ok(kind) = e.file_type() else { continue };
        if kind.is_dir() {
            if let Some(f) = first_foreign_file(&path) {
                return Some(f);
            }
        } else if !crate::atomic_write::is_temp_name(&e.file_name()) && !is_grove_file(&path) {
            return Some(path);
        }
    }
    None
}

#[cfg(unix)]
fn check_writable_dir(dir: &Path, output: &Path) -> Result<()> {
    use std::os::unix::ffi::OsStrExt;
    let Ok(c) = std::ffi::CString::new(dir.as_os_str().as_bytes()) else {
        return Ok(());
    };
    // SAFETY: `c` is a valid NUL-terminated path for the duration of the call.
    if unsafe { libc::access(c.as_ptr(), libc::W_OK | libc::X_OK) } != 0 {
        return Err(GroveError::output(
            output,
            format!(
                "cannot be written: folder {} is not writable ({})",
                dir.display(),
                crate::error::describe_io(&std::io::Error::last_os_error())
            ),
        ));
    }
    Ok(())
}

#[cfg(not(unix))]
fn check_writable_dir(_dir: &Path, _output: &Path) -> Result<()> {
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_from_data_stay_one_component() {
        assert_eq!(safe_file_name("../../../escaped"), "_.._.._.._escaped");
        assert_eq!(safe_file_name("a/b"), "a_b");
        assert_eq!(safe_file_name(".."), "_..");
        assert_eq!(safe_file_name(""), "_");
        assert_eq!(safe_file_name("line\nbreak"), "line_break");
        assert_eq!(safe_file_name("crop"), "crop");
        assert_eq!(safe_file_name(&"é".repeat(150)).len(), 200);
    }

    #[test]
    fn outputs_onto_inputs_or_foreign_files_are_refused() {
        let t = tempfile::tempdir().unwrap();
        let input = t.path().join("classes.toml");
        std::fs::write(&input, "x").unwrap();
        let foreign = t.path().join("notes.txt");
        std::fs::write(&foreign, "mine").unwrap();
        let own = t.path().join("scores.json");
        std::fs::write(&own, format!("{{\"generator\": \"{SIGNATURE}\"}}")).unwrap();
        let g = OutputGuard::new([input.as_path()], false);
        let err = g.check_file(&input).unwrap_err().to_string();
        assert!(err.contains("inputs"), "{err}");
        let err = g.check_file(&foreign).unwrap_err().to_string();
        assert!(err.contains("--force"), "{err}");
        g.check_file(&own).unwrap();
        g.check_file(&t.path().join("new/deeper/m.grove")).unwrap();
        let forced = OutputGuard::new([input.as_path()], true);
        forced.check_file(&foreign).unwrap();
        assert!(
            forced.check_file(&input).is_err(),
            "inputs even with --force"
        );
        let err = g
            .check_file(&foreign.join("m.grove"))
            .unwrap_err()
            .to_string();
        assert!(err.contains("is a file, not a folder"), "{err}");
        let err = g.check_file(t.path()).unwrap_err().to_string();
        assert!(err.contains("is a folder"), "{err}");
    }
}

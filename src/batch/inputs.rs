//! Turning `apply`'s command-line inputs into a list of image files.
//!
//! An input is one of:
//! - an image file (PNG, JPEG, TIFF);
//! - a folder: its images, not recursive (a dataset folder's `images/` if it has one);
//! - a glob pattern (`*`, `?`, `[...]`, `**`), expanded here rather than by the shell, so a
//!   quoted pattern works the same in a Slurm or Kubernetes job script, and a batch of
//!   100 000 files does not hit the shell's argument limit. Matching folders are expanded
//!   like folders, other non-image files are skipped, and a pattern matching no image is
//!   an error. A path that exists is taken literally even if it contains `[` or `*`;
//! - a list file `@LIST`: one input (file, folder or pattern) per line; blank lines and
//!   lines starting with `#` are skipped. Relative entries are relative to the folder of
//!   the list file, not to the working directory, because a job started by a scheduler
//!   often runs somewhere else than where the list was made, while a list is usually
//!   made next to (or inside) the data it names. Absolute entries are used as they are.
//!
//! The result keeps the order given (folders and patterns sorted by name), drops exact
//! repeats of the same file, and refuses two different files with the same stem, since
//! their outputs would overwrite each other.

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use crate::dataset::{check_utf8_name, list_images, stem_of};
use crate::error::{GroveError, Result};
use crate::imageio::has_image_extension;

/// Expands files, folders, glob patterns and `@list` files into image paths.
pub fn list_inputs(inputs: &[PathBuf]) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for input in inputs {
        expand(input, None, &mut out)?;
    }
    dedupe(out)
}

/// Where an input came from, for error messages: the list file and its line.
#[derive(Clone, Copy)]
struct Origin<'a> {
    list: &'a Path,
    line: usize,
}

fn fail(origin: Option<Origin>, path: &Path, message: &str) -> GroveError {
    match origin {
        None => GroveError::input(path, message),
        Some(o) => GroveError::input(
            o.list,
            format!("line {}: {}: {message}", o.line, path.display()),
        ),
    }
}

fn expand(input: &Path, origin: Option<Origin>, out: &mut Vec<PathBuf>) -> Result<()> {
    let text = input.to_str();
    if let Some(list) = text.and_then(|t| t.strip_prefix('@')) {
        if origin.is_some() {
            return Err(fail(
                origin,
                input,
                "a list file cannot name another list file",
            ));
        }
        return expand_list(Path::new(list), out);
    }
    if input.is_dir() {
        let sub = input.join("images");
        let dir: &Path = if sub.is_dir() { &sub } else { input };
        let found = list_images(dir)?;
        if found.is_empty() {
            return Err(fail(
                origin,
                dir,
                "no images (PNG, JPEG or TIFF) in this folder",
            ));
        }
        out.extend(found);
        return Ok(());
    }
    if input.is_file() {
        if !has_image_extension(input) {
            return Err(fail(origin, input, "not a PNG, JPEG or TIFF file"));
        }
        check_utf8_name(input)?;
        out.push(input.to_path_buf());
        return Ok(());
    }
    match text {
        Some(pattern) if is_pattern(pattern) => expand_pattern(pattern, origin, out),
        _ => Err(fail(origin, input, "no such file or folder")),
    }
}

fn is_pattern(text: &str) -> bool {
    text.contains(['*', '?', '['])
}

fn expand_pattern(pattern: &str, origin: Option<Origin>, out: &mut Vec<PathBuf>) -> Result<()> {
    let path = Path::new(pattern);
    let matches =
        glob::glob(pattern).map_err(|e| fail(origin, path, &format!("bad pattern: {e}")))?;
    let before = out.len();
    for m in matches {
        let m = m.map_err(|e| {
            let path = e.path().to_path_buf();
            GroveError::io(path, e.into())
        })?;
        if m.is_dir() {
            let sub = m.join("images");
            out.extend(list_images(if sub.is_dir() { &sub } else { &m })?);
        } else if has_image_extension(&m) {
            check_utf8_name(&m)?;
            out.push(m);
        }
    }
    if out.len() == before {
        return Err(fail(
            origin,
            path,
            "pattern matches no image (PNG, JPEG or TIFF)",
        ));
    }
    Ok(())
}

fn expand_list(list: &Path, out: &mut Vec<PathBuf>) -> Result<()> {
    let text = std::fs::read_to_string(list).map_err(|e| GroveError::io(list, e))?;
    let base = list.parent().unwrap_or(Path::new(""));
    let before = out.len();
    for (i, line) in text.lines().enumerate() {
        let entry = line.trim();
        if entry.is_empty() || entry.starts_with('#') {
            continue;
        }
        let origin = Origin { list, line: i + 1 };
        expand(&base.join(entry), Some(origin), out)?;
    }
    if out.len() == before {
        return Err(GroveError::input(list, "list file names no image"));
    }
    Ok(())
}

/// Drops repeats of one file (the same file named twice, e.g. by a list and a pattern)
/// and refuses distinct files that share a stem.
fn dedupe(paths: Vec<PathBuf>) -> Result<Vec<PathBuf>> {
    let mut seen: HashMap<String, PathBuf> = HashMap::new();
    let mut out = Vec::with_capacity(paths.len());
    for p in paths {
        let stem = stem_of(&p);
        match seen.get(&stem) {
            None => {
                seen.insert(stem, p.clone());
                out.push(p);
            }
            Some(first) if same_file(first, &p) => {}
            Some(first) => {
                return Err(GroveError::input(
                    &p,
                    format!(
                        "same name as {}; outputs would overwrite each other",
                        first.display()
                    ),
                ))
            }
        }
    }
    Ok(out)
}

fn same_file(a: &Path, b: &Path) -> bool {
    a == b
        || matches!(
            (std::fs::canonicalize(a), std::fs::canonicalize(b)),
            (Ok(x), Ok(y)) if x == y
        )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn touch(dir: &Path, names: &[&str]) {
        for n in names {
            let p = dir.join(n);
            std::fs::create_dir_all(p.parent().unwrap()).unwrap();
            std::fs::write(p, b"x").unwrap();
        }
    }

    fn names(paths: &[PathBuf]) -> Vec<String> {
        paths
            .iter()
            .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
            .collect()
    }

    #[test]
    fn files_folders_patterns_and_lists() {
        let t = tempfile::tempdir().unwrap();
        let d = t.path();
        touch(
            d,
            &[
                "a/x1.png",
                "a/x2.tif",
                "a/notes.txt",
                "b/images/y1.jpg",
                "c/z1.png",
                "c/z2.png",
                "lists/w.png",
            ],
        );
        std::fs::write(d.join("lists/l.txt"), "# comment\n\nw.png\n../c/z*.png\n").unwrap();
        let got = list_inputs(&[
            d.join("a"),
            d.join("b"),
            d.join("c/z2.png"),
            PathBuf::from(format!("@{}", d.join("lists/l.txt").display())),
        ])
        .unwrap();
        // z2 is named twice (directly and by the pattern in the list): kept once, first place.
        assert_eq!(
            names(&got),
            ["x1.png", "x2.tif", "y1.jpg", "z2.png", "w.png", "z1.png"]
        );
        let pat = list_inputs(&[PathBuf::from(format!("{}/*/*.png", d.display()))]).unwrap();
        assert_eq!(names(&pat), ["x1.png", "z1.png", "z2.png", "w.png"]);
    }

    #[test]
    fn mistakes_name_the_file_and_line() {
        let t = tempfile::tempdir().unwrap();
        let d = t.path();
        touch(d, &["a/x.png", "b/x.png", "notes.txt"]);
        std::fs::write(d.join("l.txt"), "a/x.png\nmissing.png\n").unwrap();
        let err = |inputs: Vec<PathBuf>| list_inputs(&inputs).unwrap_err().to_string();
        let e = err(vec![PathBuf::from(format!(
            "@{}",
            d.join("l.txt").display()
        ))]);
        assert!(
            e.contains("l.txt: line 2: ") && e.contains("missing.png"),
            "{e}"
        );
        let e = err(vec![d.join("a/x.png"), d.join("b/x.png")]);
        assert!(e.contains("same name as"), "{e}");
        let e = err(vec![PathBuf::from(format!("{}/*.jpg", d.display()))]);
        assert!(e.contains("matches no image"), "{e}");
        let e = err(vec![d.join("notes.txt")]);
        assert!(e.contains("not a PNG, JPEG or TIFF"), "{e}");
        let e = err(vec![d.join("nothing.png")]);
        assert!(e.contains("no such file"), "{e}");
    }
}

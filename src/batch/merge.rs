//! Merging the area tables of the shards of one batch (`grove merge-areas`).
//!
//! Each shard's output folder holds `areas.json` and `areas.csv` (see `eval::areas`).
//! JSON is read when present because it carries the pixel size exactly as given; the CSV
//! is the fallback (and what a user may have edited or copied alone). Tables must have the
//! same classes and pixel size, and no image may appear in two of them: a shard run twice
//! into two folders would otherwise be counted twice.

use std::path::{Path, PathBuf};

use crate::error::{GroveError, Result};
use crate::eval::areas::AreaTable;

/// The area file a folder or path stands for.
pub fn area_file(path: &Path) -> Result<PathBuf> {
    if !path.is_dir() {
        return match path.is_file() {
            true => Ok(path.to_path_buf()),
            false => Err(GroveError::input(path, "no such file or folder")),
        };
    }
    for name in ["areas.json", "areas.csv"] {
        let f = path.join(name);
        if f.is_file() {
            return Ok(f);
        }
    }
    Err(GroveError::input(
        path,
        "no areas.json or areas.csv in this folder (is it an output folder of `grove apply`?)",
    ))
}

/// One table from the tables of several output folders (or area files), in the order given.
pub fn merge_areas(inputs: &[PathBuf]) -> Result<AreaTable> {
    let mut merged: Option<(AreaTable, PathBuf)> = None;
    for input in inputs {
        let file = area_file(input)?;
        let table = AreaTable::read(&file)?;
        match &mut merged {
            None => merged = Some((table, file)),
            Some((m, first)) => m.merge(&table).map_err(|e| {
                GroveError::input(&file, format!("cannot merge with {}: {e}", first.display()))
            })?,
        }
    }
    merged
        .map(|(m, _)| m)
        .ok_or_else(|| GroveError::Config("merge-areas needs at least one folder".into()))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table(images: &[(&str, [u64; 2])]) -> AreaTable {
        let mut t = AreaTable::new(vec!["soil".into(), "crop".into()], None);
        for (name, c) in images {
            t.add_counts(name, c);
        }
        t
    }

    #[test]
    fn merges_folders_and_refuses_overlaps() {
        let d = tempfile::tempdir().unwrap();
        let (a, b, c) = (d.path().join("a"), d.path().join("b"), d.path().join("c"));
        table(&[("x", [3, 1])]).write(&a).unwrap();
        table(&[("y", [0, 4]), ("z", [2, 2])]).write(&b).unwrap();
        std::fs::remove_file(b.join("areas.json")).unwrap(); // CSV fallback
        let m = merge_areas(&[a.clone(), b.clone()]).unwrap();
        assert_eq!(m, table(&[("x", [3, 1]), ("y", [0, 4]), ("z", [2, 2])]));
        assert_eq!(m.totals(), [5, 7]);
        table(&[("z", [1, 1])]).write(&c).unwrap();
        let e = merge_areas(&[a, b, c.clone()]).unwrap_err().to_string();
        assert!(
            e.contains("areas.json") && e.contains("counted twice"),
            "{e}"
        );
        let e = merge_areas(&[d.path().join("nope")])
            .unwrap_err()
            .to_string();
        assert!(e.contains("no such file"), "{e}");
    }
}

//! Turning a label file into a map of class indices.
//!
//! Two encodings are accepted: single-channel (grey or palette-indexed PNG or TIFF, pixel value =
//! class id, one reserved value = unlabelled) and colour-coded RGB(A) through the class
//! table's colours (fully transparent pixels = unlabelled). Sparse scribbles are normal, so
//! unlabelled pixels are simply skipped downstream.

use std::collections::BTreeMap;
use std::path::Path;

use crate::dataset::classes::{hex_colour, ClassTable};
use crate::error::{GroveError, Result};
use crate::imageio::{read_label_file, LabelPixels};

/// The class index stored for pixels without a label.
pub const UNLABELLED: u8 = 255;

/// How label files are interpreted.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LabelOptions {
    /// The single-channel value meaning "no label".
    pub unlabelled_value: u8,
    /// Treat colours (or values) missing from the class table as unlabelled instead of failing.
    pub unknown_as_unlabelled: bool,
}

impl Default for LabelOptions {
    fn default() -> Self {
        LabelOptions {
            unlabelled_value: 255,
            unknown_as_unlabelled: false,
        }
    }
}

/// Class index per pixel (`UNLABELLED` where there is no label).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct LabelMap {
    pub width: usize,
    pub height: usize,
    pub indices: Vec<u8>,
}

impl LabelMap {
    /// Labelled pixel count per class index.
    pub fn class_counts(&self, n_classes: usize) -> Vec<u64> {
        let mut counts = vec![0u64; n_classes];
        for &c in &self.indices {
            if c != UNLABELLED {
                counts[c as usize] += 1;
            }
        }
        counts
    }
}

/// Reads and decodes a label file (PNG or TIFF) through the class table.
pub fn read_labels(path: &Path, table: &ClassTable, opts: &LabelOptions) -> Result<LabelMap> {
    let file = read_label_file(path)?;
    let indices =
        decode(&file.pixels, file.width, table, opts).map_err(|m| GroveError::input(path, m))?;
    Ok(LabelMap {
        width: file.width,
        height: file.height,
        indices,
    })
}

/// As [`read_labels`], for an image of `size` (width, height): a label file of another
/// size is an error naming it.
pub fn read_labels_for(
    path: &Path,
    table: &ClassTable,
    opts: &LabelOptions,
    size: (usize, usize),
) -> Result<LabelMap> {
    // Header first: a label that declares another size is refused before it is decoded.
    let declared = crate::imageio::probe_label_file(path)?;
    if declared != size {
        return Err(GroveError::input(
            path,
            format!(
                "label size {}x{} differs from image size {}x{}",
                declared.0, declared.1, size.0, size.1
            ),
        ));
    }
    read_labels(path, table, opts)
}

/// Maps raw label pixels to class indices; the error lists what is wrong and where.
pub fn decode(
    pixels: &LabelPixels,
    width: usize,
    table: &ClassTable,
    opts: &LabelOptions,
) -> std::result::Result<Vec<u8>, String> {
    // Unknown value → (count, first position); BTreeMap keeps the message stable.
    let mut unknown: BTreeMap<String, (u64, usize)> = BTreeMap::new();
    let mut note = |key: String, i: usize| {
        unknown.entry(key).or_insert((0, i)).0 += 1;
    };
    let lookup_id: Vec<Option<u8>> = (0..=255u8)
        .map(|v| table.index_of_id(v).map(|i| i as u8))
        .collect();
    let out: Vec<u8> = match pixels {
        LabelPixels::Values(values) => values
            .iter()
            .enumerate()
            .map(|(i, &v)| {
                if v == opts.unlabelled_value {
                    return UNLABELLED;
                }
                lookup_id[v as usize].unwrap_or_else(|| {
                    note(format!("value {v}"), i);
                    UNLABELLED
                })
            })
            .collect(),
        // Many tools save index masks as RGB with R = G = B; read those as values when the
        // table has no grey colours (so the reading cannot be ambiguous).
        LabelPixels::Colours(colours) if is_grey_index_mask(colours, table) => {
            let values = LabelPixels::Values(
                colours
                    .iter()
                    .map(|p| {
                        if p[3] == 0 {
                            opts.unlabelled_value
                        } else {
                            p[0]
                        }
                    })
                    .collect(),
            );
            return decode(&values, width, table, opts);
        }
        LabelPixels::Colours(colours) => {
            let mut last: Option<([u8; 4], u8)> = None;
            colours
                .iter()
                .enumerate()
                .map(|(i, &px)| {
                    if px[3] == 0 {
                        return UNLABELLED;
                    }
                    if let Some((c, idx)) = last {
                        if c == px {
                            return idx;
                        }
                    }
                    let rgb = [px[0], px[1], px[2]];
                    match table.index_of_colour(rgb) {
                        Some(idx) => {
                            last = Some((px, idx as u8));
                            idx as u8
                        }
                        None => {
                            note(format!("colour {}", hex_colour(rgb)), i);
                            UNLABELLED
                        }
                    }
                })
                .collect()
        }
    };
    if !unknown.is_empty() && !opts.unknown_as_unlabelled {
        let total = unknown.len();
        let listed: Vec<String> = unknown
            .iter()
            .take(8)
            .map(|(k, (n, i))| format!("{k} ({n} px, first at x={}, y={})", i % width, i / width))
            .collect();
        let more = if total > 8 {
            format!(" and {} more", total - 8)
        } else {
            String::new()
        };
        return Err(format!(
            "label pixels not in the class table: {}{more}. Add them to classes.toml, or pass --unknown-as-unlabelled to ignore them",
            listed.join(", ")
        ));
    }
    Ok(out)
}

fn is_grey_index_mask(colours: &[[u8; 4]], table: &ClassTable) -> bool {
    let grey = |c: &[u8]| c[0] == c[1] && c[1] == c[2];
    !table.classes().iter().any(|c| grey(&c.color)) && colours.iter().all(|p| grey(p))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table() -> ClassTable {
        ClassTable::parse(
            "[[class]]\nid = 0\nname = \"a\"\ncolor = \"#ff0000\"\n[[class]]\nid = 7\nname = \"b\"\ncolor = \"#00ff00\"\n",
            255,
        )
        .unwrap()
    }

    #[test]
    fn values_map_to_indices_and_unknowns_are_reported() {
        let opts = LabelOptions::default();
        let px = LabelPixels::Values(vec![0, 7, 255, 7]);
        assert_eq!(
            decode(&px, 2, &table(), &opts).unwrap(),
            vec![0, 1, UNLABELLED, 1]
        );
        let bad = LabelPixels::Values(vec![0, 3, 3, 7]);
        let err = decode(&bad, 2, &table(), &opts).unwrap_err();
        assert!(err.contains("value 3 (2 px, first at x=1, y=0)"), "{err}");
        let lenient = LabelOptions {
            unknown_as_unlabelled: true,
            ..opts
        };
        assert_eq!(
            decode(&bad, 2, &table(), &lenient).unwrap(),
            vec![0, UNLABELLED, UNLABELLED, 1]
        );
    }

    #[test]
    fn grey_rgb_masks_read_as_values() {
        let opts = LabelOptions::default();
        let px = LabelPixels::Colours(vec![
            [0, 0, 0, 255],
            [7, 7, 7, 255],
            [255, 255, 255, 255],
            [7, 7, 7, 0],
        ]);
        assert_eq!(
            decode(&px, 2, &table(), &opts).unwrap(),
            vec![0, 1, UNLABELLED, UNLABELLED]
        );
    }

    #[test]
    fn colours_map_through_the_table() {
        let opts = LabelOptions::default();
        let px = LabelPixels::Colours(vec![
            [255, 0, 0, 255],
            [0, 255, 0, 255],
            [0, 0, 0, 0],
            [1, 2, 3, 255],
        ]);
        let err = decode(&px, 2, &table(), &opts).unwrap_err();
        assert!(
            err.contains("colour #010203 (1 px, first at x=1, y=1)"),
            "{err}"
        );
        let lenient = LabelOptions {
            unknown_as_unlabelled: true,
            ..opts
        };
        assert_eq!(
            decode(&px, 2, &table(), &lenient).unwrap(),
            vec![0, 1, UNLABELLED, UNLABELLED]
        );
    }
}

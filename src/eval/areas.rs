//! Per-class pixel counts and area figures of label maps, as `apply` writes them to
//! `areas.csv` / `areas.json`.
//!
//! An [`AreaTable`] holds, per image, the pixel count of every class over the counted
//! pixels (the whole image, or a region of interest). Counts only ever add up, so a huge
//! image can be fed tile by tile ([`AreaTable::add_counts`] on the same image name) and the
//! tables of several shards can be combined ([`AreaTable::merge`]). The fraction of a class
//! is its count over the counted pixels of that image (the ROI when one is given), and the
//! `ALL` rows pool every image. With a [`PixelSize`] each row also carries the area in the
//! unit squared.
//!
//! CSV columns: `image,class,pixels,fraction` and, with a pixel size, `area,unit`. The JSON
//! holds the same rows (`{"pixel_size", "classes", "rows": [{"image", "class", "pixels",
//! "fraction", "area", "unit"}]}`), so either file can be read back and merged.

use std::fmt::Write as _;
use std::path::Path;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

use crate::error::{GroveError, Result};

/// The image name of the rows that pool all images.
pub const ALL_IMAGES: &str = "ALL";

/// Length units accepted for `--pixel-size`; areas stay in the unit given (squared).
const UNITS: &[&str] = &["km", "m", "cm", "mm", "um", "nm", "in", "ft"];

/// The side of one (square) pixel on the ground or specimen, e.g. `0.05m` or `2.5um`.
#[derive(Clone, Debug, PartialEq)]
pub struct PixelSize {
    pub length: f64,
    /// Length unit, one of `km m cm mm um nm in ft` (`µm` is read as `um`).
    pub unit: String,
}

impl PixelSize {
    /// Area of one pixel in the unit squared.
    pub fn pixel_area(&self) -> f64 {
        self.length * self.length
    }

    /// The area unit as written in tables, e.g. `m2`.
    pub fn area_unit(&self) -> String {
        format!("{}2", self.unit)
    }
}

impl std::fmt::Display for PixelSize {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}{}", self.length, self.unit)
    }
}

impl FromStr for PixelSize {
    type Err = GroveError;

    fn from_str(text: &str) -> Result<Self> {
        let t = text.trim().replace(['µ', 'μ'], "u");
        let split = t.find(|c: char| c.is_ascii_alphabetic()).unwrap_or(t.len());
        let (num, unit) = t.split_at(split);
        let bad = |why: &str| {
            GroveError::Config(format!(
                "--pixel-size '{text}': {why} (write the side of one pixel with its unit, e.g. 0.05m or 2.5um; units: {})",
                UNITS.join(" ")
            ))
        };
        let length: f64 = num.trim().parse().map_err(|_| bad("not a number"))?;
        if !(length.is_finite() && length > 0.0) {
            return Err(bad("must be positive"));
        }
        let unit = unit.trim();
        if unit.is_empty() {
            return Err(bad("missing unit"));
        }
        if !UNITS.contains(&unit) {
            return Err(bad("unknown unit"));
        }
        Ok(PixelSize {
            length,
            unit: unit.to_string(),
        })
    }
}

/// Pixel count per class index over the counted pixels: every pixel, or those where
/// `roi` is true. Classes at or beyond `n_classes` (e.g. an unlabelled marker) are skipped.
pub fn count_classes(index: &[u8], n_classes: usize, roi: Option<&[bool]>) -> Vec<u64> {
    let mut counts = vec![0u64; n_classes];
    match roi {
        None => index.iter().for_each(|&c| {
            if let Some(n) = counts.get_mut(c as usize) {
                *n += 1
            }
        }),
        Some(mask) => index.iter().zip(mask).for_each(|(&c, &inside)| {
            if inside {
                if let Some(n) = counts.get_mut(c as usize) {
                    *n += 1
                }
            }
        }),
    }
    counts
}

/// Per-image, per-class pixel counts; see the module documentation.
#[derive(Clone, Debug, PartialEq)]
pub struct AreaTable {
    classes: Vec<String>,
    pixel_size: Option<PixelSize>,
    /// (image name, counts per class), in the order images were first added.
    images: Vec<(String, Vec<u64>)>,
}

/// One row of the table, as written to CSV and JSON.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AreaRow {
    pub image: String,
    pub class: String,
    pub pixels: u64,
    pub fraction: f64,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub area: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unit: Option<String>,
}

#[derive(Serialize, Deserialize)]
struct AreaJson {
    /// "written by grove VERSION": marks the file as grove's own (see `output_guard`); absent
    /// from files of older versions.
    #[serde(default)]
    generator: Option<String>,
    /// E.g. "0.05m"; null without a pixel size.
    pixel_size: Option<String>,
    classes: Vec<String>,
    rows: Vec<AreaRow>,
}

/// The first columns of every `areas.csv`. A CSV has no place for a signature that
/// spreadsheets and `read.csv` would not show as data, so `output_guard` recognises grove's
/// area tables by this header instead.
pub const CSV_HEADER: &str = "image,class,pixels,fraction";

impl AreaTable {
    pub fn new(classes: Vec<String>, pixel_size: Option<PixelSize>) -> Self {
        AreaTable {
            classes,
            pixel_size,
            images: Vec::new(),
        }
    }

    pub fn classes(&self) -> &[String] {
        &self.classes
    }

    pub fn pixel_size(&self) -> Option<&PixelSize> {
        self.pixel_size.as_ref()
    }

    /// Image names in the order they were first added.
    pub fn images(&self) -> impl Iterator<Item = &str> {
        self.images.iter().map(|(n, _)| n.as_str())
    }

    /// Counts per class of one image (`None` if it was never added).
    pub fn counts_of(&self, image: &str) -> Option<&[u64]> {
        self.images
            .iter()
            .find(|(n, _)| n == image)
            .map(|(_, c)| c.as_slice())
    }

    /// Adds counts (per class index) to `image`, creating it on first use: a whole image at
    /// once, or its tiles one after another.
    pub fn add_counts(&mut self, image: &str, counts: &[u64]) {
        assert_eq!(
            counts.len(),
            self.classes.len(),
            "one count per class of the table"
        );
        assert_ne!(image, ALL_IMAGES, "ALL is reserved for the total rows");
        match self.images.iter_mut().find(|(n, _)| n == image) {
            Some((_, c)) => c.iter_mut().zip(counts).for_each(|(a, b)| *a += b),
            None => self.images.push((image.to_string(), counts.to_vec())),
        }
    }

    /// Pooled counts per class over all images.
    pub fn totals(&self) -> Vec<u64> {
        let mut t = vec![0u64; self.classes.len()];
        for (_, c) in &self.images {
            t.iter_mut().zip(c).for_each(|(a, b)| *a += b);
        }
        t
    }

    /// Combines the tables of shards that cover different images. Fails when the classes or
    /// pixel sizes differ, or when an image appears in both (it would be counted twice).
    pub fn merge(&mut self, other: &AreaTable) -> std::result::Result<(), String> {
        if self.classes != other.classes {
            return Err(format!(
                "different classes ({} vs {})",
                self.classes.join(", "),
                other.classes.join(", ")
            ));
        }
        let same_size = match (&self.pixel_size, &other.pixel_size) {
            (None, None) => true,
            (Some(a), Some(b)) => {
                a.unit == b.unit && (a.length - b.length).abs() <= 1e-9 * a.length.abs()
            }
            _ => false,
        };
        if !same_size {
            let show = |p: &Option<PixelSize>| p.as_ref().map_or("none".into(), |p| p.to_string());
            return Err(format!(
                "different pixel sizes ({} vs {})",
                show(&self.pixel_size),
                show(&other.pixel_size)
            ));
        }
        if let Some((name, _)) = other
            .images
            .iter()
            .find(|(n, _)| self.counts_of(n).is_some())
        {
            return Err(format!(
                "image '{name}' is in both tables; it would be counted twice"
            ));
        }
        self.images.extend(other.images.iter().cloned());
        Ok(())
    }

    fn row(&self, image: &str, class: usize, counts: &[u64]) -> AreaRow {
        let total: u64 = counts.iter().sum();
        let pixels = counts[class];
        AreaRow {
            image: image.to_string(),
            class: self.classes[class].clone(),
            pixels,
            fraction: if total == 0 {
                0.0
            } else {
                pixels as f64 / total as f64
            },
            area: self
                .pixel_size
                .as_ref()
                .map(|p| rounded(pixels as f64 * p.pixel_area())),
            unit: self.pixel_size.as_ref().map(PixelSize::area_unit),
        }
    }

    /// Every row: per image and class, then the `ALL` rows.
    pub fn rows(&self) -> Vec<AreaRow> {
        let mut rows = Vec::new();
        for (name, counts) in &self.images {
            rows.extend((0..self.classes.len()).map(|c| self.row(name, c, counts)));
        }
        let totals = self.totals();
        rows.extend((0..self.classes.len()).map(|c| self.row(ALL_IMAGES, c, &totals)));
        rows
    }

    pub fn to_csv(&self) -> String {
        let mut s = String::from(CSV_HEADER);
        if self.pixel_size.is_some() {
            s += ",area,unit";
        }
        s += "\n";
        for r in self.rows() {
            let _ = write!(
                s,
                "{},{},{},{:.6}",
                csv_field(&r.image),
                csv_field(&r.class),
                r.pixels,
                r.fraction
            );
            if let (Some(a), Some(u)) = (r.area, &r.unit) {
                let _ = write!(s, ",{},{}", a, csv_field(u));
            }
            s += "\n";
        }
        s
    }

    pub fn to_json(&self) -> String {
        let doc = AreaJson {
            generator: Some(crate::output_guard::generator()),
            pixel_size: self.pixel_size.as_ref().map(PixelSize::to_string),
            classes: self.classes.clone(),
            rows: self.rows(),
        };
        serde_json::to_string_pretty(&doc).expect("area rows serialise") + "\n"
    }

    /// Rebuilds a table from its rows (the `ALL` rows are recomputed, not trusted).
    fn from_rows(
        classes: Vec<String>,
        pixel_size: Option<PixelSize>,
        rows: &[AreaRow],
    ) -> std::result::Result<Self, String> {
        let mut table = AreaTable::new(classes, pixel_size);
        for r in rows.iter().filter(|r| r.image != ALL_IMAGES) {
            let c = table
                .classes
                .iter()
                .position(|n| *n == r.class)
                .ok_or_else(|| {
                    format!(
                        "row for image '{}' has unknown class '{}'",
                        r.image, r.class
                    )
                })?;
            let mut counts = vec![0u64; table.classes.len()];
            counts[c] = r.pixels;
            table.add_counts(&r.image, &counts);
        }
        Ok(table)
    }

    pub fn from_json(text: &str) -> std::result::Result<Self, String> {
        let doc: AreaJson = serde_json::from_str(text).map_err(|e| e.to_string())?;
        let pixel_size = match doc.pixel_size {
            Some(p) => Some(p.parse::<PixelSize>().map_err(|e| e.to_string())?),
            None => None,
        };
        AreaTable::from_rows(doc.classes, pixel_size, &doc.rows)
    }

    /// Reads `to_csv` output. The classes are taken in the order of their first rows; the
    /// pixel size is recovered from area / pixels (which is why CSV areas keep full precision).
    pub fn from_csv(text: &str) -> std::result::Result<Self, String> {
        let mut lines = text.lines().filter(|l| !l.trim().is_empty());
        let header = lines.next().ok_or("empty file")?;
        let cols = split_csv(header)?;
        let with_area = match cols.iter().map(String::as_str).collect::<Vec<_>>()[..] {
            ["image", "class", "pixels", "fraction"] => false,
            ["image", "class", "pixels", "fraction", "area", "unit"] => true,
            _ => {
                return Err(format!(
                "unexpected header '{header}' (expected image,class,pixels,fraction[,area,unit])"
            ))
            }
        };
        let mut rows = Vec::new();
        let mut classes: Vec<String> = Vec::new();
        let mut pixel_size: Option<PixelSize> = None;
        for (i, line) in lines.enumerate() {
            let f = split_csv(line)?;
            let at = |m: &str| format!("line {}: {m}", i + 2);
            if f.len() != cols.len() {
                return Err(at(&format!("{} fields, expected {}", f.len(), cols.len())));
            }
            let pixels: u64 = f[2].parse().map_err(|_| at("pixels is not a count"))?;
            if !classes.contains(&f[1]) {
                classes.push(f[1].clone());
            }
            if with_area && pixels > 0 && pixel_size.is_none() {
                let area: f64 = f[4].parse().map_err(|_| at("area is not a number"))?;
                let unit = f[5]
                    .strip_suffix('2')
                    .ok_or_else(|| at("unit should be an area unit such as m2"))?;
                pixel_size = Some(PixelSize {
                    length: rounded((area / pixels as f64).sqrt()),
                    unit: unit.to_string(),
                });
            }
            rows.push(AreaRow {
                image: f[0].clone(),
                class: f[1].clone(),
                pixels,
                fraction: 0.0,
                area: None,
                unit: None,
            });
        }
        AreaTable::from_rows(classes, pixel_size, &rows)
    }

    /// Reads an `areas.csv` or `areas.json` (by extension), naming the file in errors.
    pub fn read(path: &Path) -> Result<Self> {
        let text = std::fs::read_to_string(path).map_err(|e| GroveError::io(path, e))?;
        let is_json = path
            .extension()
            .is_some_and(|e| e.eq_ignore_ascii_case("json"));
        let parsed = if is_json {
            AreaTable::from_json(&text)
        } else {
            AreaTable::from_csv(&text)
        };
        parsed.map_err(|m| GroveError::input(path, format!("not an area table: {m}")))
    }

    /// Writes `DIR/areas.csv` and `DIR/areas.json` (each atomically).
    pub fn write(&self, dir: &Path) -> Result<()> {
        crate::imageio::write_atomic(&dir.join("areas.csv"), self.to_csv().as_bytes())?;
        crate::imageio::write_atomic(&dir.join("areas.json"), self.to_json().as_bytes())
    }
}

/// The region-of-interest masks of a folder, found by image stem (`--roi DIR`).
pub struct RoiMasks {
    dir: std::path::PathBuf,
    by_stem: std::collections::BTreeMap<String, std::path::PathBuf>,
}

impl RoiMasks {
    pub fn open(dir: &Path) -> Result<Self> {
        if !dir.is_dir() {
            return Err(GroveError::input(dir, "ROI folder not found"));
        }
        let by_stem = crate::dataset::list_images(dir)?
            .into_iter()
            .map(|p| (crate::dataset::stem_of(&p), p))
            .collect();
        Ok(RoiMasks {
            dir: dir.to_path_buf(),
            by_stem,
        })
    }

    /// The folder the masks come from.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Fails, naming the first, when an image has no mask (checked before any work).
    pub fn check_covers<'a>(&self, stems: impl IntoIterator<Item = &'a str>) -> Result<()> {
        match stems.into_iter().find(|s| !self.by_stem.contains_key(*s)) {
            Some(stem) => Err(GroveError::input(
                &self.dir,
                format!("no ROI mask for image '{stem}' (expected {stem}.png here)"),
            )),
            None => Ok(()),
        }
    }

    /// The mask of image `stem`: true where any channel is non-zero (white = counted).
    pub fn mask(&self, stem: &str, width: usize, height: usize) -> Result<Vec<bool>> {
        self.rows(stem, width, height)?.next_rows(height)
    }

    /// The mask of image `stem`, read a few rows at a time (PNG and TIFF masks are never
    /// decoded whole, so a mask as large as a streamed image costs no more memory than it).
    pub fn rows(&self, stem: &str, width: usize, height: usize) -> Result<MaskRows> {
        let path = self.by_stem.get(stem).ok_or_else(|| {
            GroveError::input(
                &self.dir,
                format!("no ROI mask for image '{stem}' (expected {stem}.png here)"),
            )
        })?;
        let source = crate::imageio::stream::open_rows(path)?;
        if (source.width(), source.height()) != (width, height) {
            return Err(GroveError::input(
                path,
                format!(
                    "ROI mask is {}x{} but the image is {width}x{height}",
                    source.width(),
                    source.height()
                ),
            ));
        }
        Ok(MaskRows { source })
    }
}

/// A region-of-interest mask delivered top to bottom ([`RoiMasks::rows`]).
pub struct MaskRows {
    source: Box<dyn crate::imageio::stream::RowSource>,
}

impl MaskRows {
    /// The next `n` rows: true where any channel is non-zero.
    pub fn next_rows(&mut self, n: usize) -> Result<Vec<bool>> {
        let mut planes = vec![Vec::new(); self.source.channels()];
        self.source.read_rows(n, &mut planes)?;
        let px = n * self.source.width();
        Ok((0..px).map(|i| planes.iter().any(|c| c[i] > 0.0)).collect())
    }
}

/// `v` to 12 significant digits, without trailing zeros: areas are products of counts and a
/// pixel area, and their last binary digits are noise (0.05² × 16710 = 41.775000000000006).
fn significant(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let digits = (11 - v.abs().log10().floor() as i32).max(0) as usize;
    let s = format!("{v:.digits$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

fn rounded(v: f64) -> f64 {
    significant(v).parse().expect("a formatted number parses")
}

fn csv_field(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// Splits one CSV line (RFC 4180 quoting, no embedded newlines).
fn split_csv(line: &str) -> std::result::Result<Vec<String>, String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut chars = line.trim_end_matches('\r').chars().peekable();
    let mut quoted = false;
    while let Some(ch) = chars.next() {
        match (quoted, ch) {
            (true, '"') if chars.peek() == Some(&'"') => {
                chars.next();
                cur.push('"');
            }
            (true, '"') => quoted = false,
            (false, '"') if cur.is_empty() => quoted = true,
            (false, ',') => out.push(std::mem::take(&mut cur)),
            (_, c) => cur.push(c),
        }
    }
    if quoted {
        return Err(format!("unclosed quote in '{line}'"));
    }
    out.push(cur);
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table() -> AreaTable {
        let mut t = AreaTable::new(
            vec!["soil".into(), "crop, young".into()],
            Some("0.5m".parse().unwrap()),
        );
        t.add_counts("a", &[3, 1]);
        t.add_counts("b", &[0, 4]);
        t
    }

    #[test]
    fn pixel_sizes_parse_with_units() {
        let p: PixelSize = "2.5µm".parse().unwrap();
        assert_eq!((p.length, p.unit.as_str()), (2.5, "um"));
        assert_eq!(p.area_unit(), "um2");
        assert_eq!("0.05 m".parse::<PixelSize>().unwrap().length, 0.05);
        for bad in ["0.05", "m", "-1m", "3parsec", "0m"] {
            assert!(bad.parse::<PixelSize>().is_err(), "{bad}");
        }
    }

    #[test]
    fn counts_respect_the_roi_and_skip_unlabelled() {
        let idx = [0u8, 1, 1, 255, 0];
        assert_eq!(count_classes(&idx, 2, None), vec![2, 2]);
        let roi = [true, false, true, true, false];
        assert_eq!(count_classes(&idx, 2, Some(&roi)), vec![1, 1]);
    }

    #[test]
    fn tiles_add_up_to_the_whole_image() {
        let mut t = AreaTable::new(vec!["x".into(), "y".into()], None);
        t.add_counts("img", &[1, 2]);
        t.add_counts("img", &[3, 0]);
        assert_eq!(t.counts_of("img"), Some(&[4, 2][..]));
        let rows = t.rows();
        assert_eq!(rows.len(), 4);
        assert!((rows[0].fraction - 4.0 / 6.0).abs() < 1e-12);
        assert_eq!(rows[2].image, ALL_IMAGES);
    }

    #[test]
    fn fractions_areas_and_totals() {
        let csv = table().to_csv();
        assert_eq!(
            csv,
            "image,class,pixels,fraction,area,unit\n\
             a,soil,3,0.750000,0.75,m2\n\
             a,\"crop, young\",1,0.250000,0.25,m2\n\
             b,soil,0,0.000000,0,m2\n\
             b,\"crop, young\",4,1.000000,1,m2\n\
             ALL,soil,3,0.375000,0.75,m2\n\
             ALL,\"crop, young\",5,0.625000,1.25,m2\n"
        );
    }

    #[test]
    fn csv_and_json_round_trip() {
        let t = table();
        assert_eq!(AreaTable::from_csv(&t.to_csv()).unwrap(), t);
        assert_eq!(AreaTable::from_json(&t.to_json()).unwrap(), t);
        let mut fine = AreaTable::new(vec!["x".into()], Some("0.05m".parse().unwrap()));
        fine.add_counts("a", &[16710]);
        assert!(fine.to_csv().contains(",41.775,m2"));
        assert_eq!(AreaTable::from_csv(&fine.to_csv()).unwrap(), fine);
        let plain = AreaTable::new(vec!["x".into()], None);
        assert_eq!(AreaTable::from_csv(&plain.to_csv()).unwrap(), plain);
    }

    #[test]
    fn merge_joins_shards_and_refuses_overlap() {
        let mut a = table();
        let mut b = AreaTable::new(a.classes().to_vec(), Some("0.5m".parse().unwrap()));
        b.add_counts("c", &[2, 2]);
        a.merge(&b).unwrap();
        assert_eq!(a.totals(), vec![5, 7]);
        assert!(a.merge(&b).unwrap_err().contains("'c'"));
        let other = AreaTable::new(a.classes().to_vec(), None);
        assert!(a.merge(&other).unwrap_err().contains("pixel sizes"));
    }
}

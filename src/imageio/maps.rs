//! One interface for writing an output map (label map, overlay, grey map) as PNG or TIFF,
//! whole or row by row, so the whole-image and the streamed apply write the same files.

use std::path::Path;

use super::stream_out::PngRowWriter;
use super::tiff_out::{TiffFlavour, TiffPixels, TiffRowWriter};
use super::tiff_tags::TiffTag;
use crate::error::Result;

/// File format of the output maps (`--map-format`).
#[derive(
    Clone,
    Copy,
    Debug,
    Default,
    PartialEq,
    Eq,
    clap::ValueEnum,
    serde::Serialize,
    serde::Deserialize,
)]
#[serde(rename_all = "lowercase")]
pub enum MapFormat {
    /// PNG (compressed).
    #[default]
    Png,
    /// TIFF (uncompressed strips; BigTIFF when past 4 GiB); a TIFF input's resolution and
    /// georeferencing tags are copied on.
    #[value(alias = "tif")]
    Tiff,
}

impl MapFormat {
    /// File-name extension.
    pub fn extension(self) -> &'static str {
        match self {
            MapFormat::Png => "png",
            MapFormat::Tiff => "tif",
        }
    }
}

/// What a map holds.
#[derive(Clone, Copy, Debug)]
pub enum MapKind<'a> {
    /// Class ids, shown through this palette.
    Labels(&'a [[u8; 3]; 256]),
    Grey,
    Rgb,
}

/// How a map is written beyond its pixels: format, tags copied from the input (TIFF only),
/// and whether a TIFF must be BigTIFF.
#[derive(Clone, Copy, Debug)]
pub struct MapStyle<'a> {
    pub format: MapFormat,
    pub tags: &'a [TiffTag],
    pub flavour: TiffFlavour,
}

impl MapStyle<'static> {
    pub const PNG: MapStyle<'static> = MapStyle {
        format: MapFormat::Png,
        tags: &[],
        flavour: TiffFlavour::Auto,
    };
}

/// A map being written row by row.
pub enum MapWriter {
    Png(PngRowWriter),
    Tiff(TiffRowWriter),
}

impl MapWriter {
    pub fn create(
        path: &Path,
        (width, height): (usize, usize),
        kind: MapKind,
        style: &MapStyle,
    ) -> Result<MapWriter> {
        Ok(match style.format {
            MapFormat::Png => {
                use png::ColorType as C;
                let (color, palette) = match kind {
                    MapKind::Labels(p) => (C::Indexed, Some(p.iter().flatten().copied().collect())),
                    MapKind::Grey => (C::Grayscale, None),
                    MapKind::Rgb => (C::Rgb, None),
                };
                MapWriter::Png(PngRowWriter::create(path, width, height, color, palette)?)
            }
            MapFormat::Tiff => {
                let pixels = match kind {
                    MapKind::Labels(p) => TiffPixels::Palette(Box::new(*p)),
                    MapKind::Grey => TiffPixels::Grey8,
                    MapKind::Rgb => TiffPixels::Rgb8,
                };
                MapWriter::Tiff(TiffRowWriter::create(
                    path,
                    width,
                    height,
                    pixels,
                    style.tags,
                    style.flavour,
                )?)
            }
        })
    }

    /// Appends whole rows.
    pub fn write_rows(&mut self, bytes: &[u8]) -> Result<()> {
        match self {
            MapWriter::Png(w) => w.write_rows(bytes),
            MapWriter::Tiff(w) => w.write_rows(bytes),
        }
    }

    /// Completes the file and renames it into place.
    pub fn finish(self) -> Result<()> {
        match self {
            MapWriter::Png(w) => w.finish(),
            MapWriter::Tiff(w) => w.finish(),
        }
    }
}

/// Writes a whole map. PNGs go through the in-memory encoder (which marks them as grove's),
/// TIFFs through the row writer in one piece.
pub fn write_map(
    path: &Path,
    size: (usize, usize),
    kind: MapKind,
    style: &MapStyle,
    data: &[u8],
) -> Result<()> {
    let (w, h) = size;
    match style.format {
        MapFormat::Png => match kind {
            MapKind::Labels(p) => super::write_label_png(path, w, h, data, p),
            MapKind::Grey => super::write_grey_png(path, w, h, data),
            MapKind::Rgb => super::write_rgb_png(path, w, h, data),
        },
        MapFormat::Tiff => {
            let mut wr = MapWriter::create(path, size, kind, style)?;
            wr.write_rows(data)?;
            wr.finish()
        }
    }
}

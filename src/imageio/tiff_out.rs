//! An uncompressed, strip-organised, little-endian TIFF written row by row (TIFF 6.0,
//! sections 2–5 and 8; BigTIFF as specified by Aware Systems' "BigTIFF File Format
//! Proposal": magic 43, 8-byte offsets, 20-byte directory entries).
//!
//! grove writes its own rather than using the `tiff` crate's encoder: that encoder can write
//! BigTIFF (`TiffEncoder::new_big`) and strip by strip (`ImageEncoder::write_strip`), but its
//! `ImageEncoder<'a, ..>` holds `&'a mut` of the `TiffEncoder` it came from, so it cannot be
//! kept open between the calls of a streamed apply without a self-referential struct or a
//! thread of its own; it has no palette colour type, always writes its own resolution tags
//! first, and it picks standard or BigTIFF by type rather than by the size of the file. An
//! uncompressed writer is short, and its size is known before the first byte, which is what
//! lets BigTIFF be chosen only when the file needs it. The `tiff` crate stays the reader.
//!
//! Layout: header, the Software string (within the first 4 KiB, so `output_guard` knows the
//! file as grove's), the pixel rows as they arrive, then every other tag value and the one
//! image directory; the header's directory offset is filled in last. The file lives under a
//! temporary name until `finish`.

use std::io::{BufWriter, Seek, SeekFrom, Write};
use std::path::Path;

use super::tiff_tags::{type_size, TiffTag};
use crate::atomic_write::AtomicFile;
use crate::error::{GroveError, Result};

/// What the pixels are.
#[derive(Clone, Debug)]
pub enum TiffPixels {
    /// One byte per pixel, an index into this colour map (photometric RGB Palette): label maps.
    Palette(Box<[[u8; 3]; 256]>),
    /// One byte per pixel, 0 = black.
    Grey8,
    /// Three bytes per pixel, interleaved.
    Rgb8,
}

impl TiffPixels {
    fn samples(&self) -> usize {
        match self {
            TiffPixels::Rgb8 => 3,
            _ => 1,
        }
    }
}

/// Standard TIFF or BigTIFF.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub enum TiffFlavour {
    /// BigTIFF only when a standard TIFF would pass 4 GiB (its 32-bit offsets' limit).
    #[default]
    Auto,
    /// BigTIFF whatever the size (for tests, and readers that want it).
    Big,
}

/// Rows per strip: strips of about 256 KiB keep the strip tables short and let readers
/// fetch a few rows without reading much more.
const STRIP_BYTES: usize = 256 << 10;

/// Room for the directory and the out-of-line tag values, beyond the pixel data and strip
/// tables, when deciding whether a standard TIFF fits (generous: a colour map is 1.5 KiB,
/// passed-through tags are bounded by `tiff_tags`).
const TAG_ROOM: u64 = 16 << 20;

/// A TIFF being written (see the module documentation).
pub struct TiffRowWriter {
    out: AtomicFile,
    writer: BufWriter<std::fs::File>,
    big: bool,
    width: usize,
    height: usize,
    pixels: TiffPixels,
    extra: Vec<TiffTag>,
    software: (u64, u64),
    data_start: u64,
    rows_per_strip: usize,
    rows_written: usize,
}

/// One directory entry before it is placed: tag, type, count, little-endian values.
struct Entry {
    tag: u16,
    field_type: u16,
    count: u64,
    data: Vec<u8>,
    /// Where the values already are in the file (written before the pixels).
    at: Option<u64>,
}

fn shorts(tag: u16, v: &[u16]) -> Entry {
    Entry {
        tag,
        field_type: 3,
        count: v.len() as u64,
        data: v.iter().flat_map(|x| x.to_le_bytes()).collect(),
        at: None,
    }
}

fn long(tag: u16, v: u32) -> Entry {
    Entry {
        tag,
        field_type: 4,
        count: 1,
        data: v.to_le_bytes().to_vec(),
        at: None,
    }
}

fn rational(tag: u16, n: u32, d: u32) -> Entry {
    let mut data = n.to_le_bytes().to_vec();
    data.extend_from_slice(&d.to_le_bytes());
    Entry {
        tag,
        field_type: 5,
        count: 1,
        data,
        at: None,
    }
}

impl TiffRowWriter {
    /// Starts `path`; `extra` are tags copied from the input (see `tiff_tags`), which replace
    /// grove's default resolution tags.
    pub fn create(
        path: &Path,
        width: usize,
        height: usize,
        pixels: TiffPixels,
        extra: &[TiffTag],
        flavour: TiffFlavour,
    ) -> Result<TiffRowWriter> {
        if width == 0 || height == 0 || width > u32::MAX as usize || height > u32::MAX as usize {
            return Err(GroveError::input(
                path,
                format!("cannot write a TIFF of {width} × {height} pixels"),
            ));
        }
        let row_bytes = width * pixels.samples();
        let rows_per_strip = (STRIP_BYTES / row_bytes).clamp(1, height);
        let strips = height.div_ceil(rows_per_strip) as u64;
        let data = (row_bytes as u64) * height as u64;
        let standard_limit = u32::MAX as u64;
        let big = flavour == TiffFlavour::Big || data + 8 * strips + TAG_ROOM > standard_limit;
        let out = AtomicFile::create(path)?;
        let mut writer = BufWriter::with_capacity(1 << 20, out.handle()?);
        let mut head: Vec<u8> = b"II".to_vec();
        if big {
            head.extend_from_slice(&43u16.to_le_bytes());
            head.extend_from_slice(&8u16.to_le_bytes());
            head.extend_from_slice(&0u16.to_le_bytes());
            head.extend_from_slice(&0u64.to_le_bytes());
        } else {
            head.extend_from_slice(&42u16.to_le_bytes());
            head.extend_from_slice(&0u32.to_le_bytes());
        }
        let mut software = crate::output_guard::generator().into_bytes();
        software.push(0);
        let software_at = (head.len() as u64, software.len() as u64);
        head.extend_from_slice(&software);
        if head.len() % 2 == 1 {
            head.push(0); // word alignment (TIFF 6.0, section 2)
        }
        writer
            .write_all(&head)
            .map_err(|e| GroveError::write(path, e))?;
        Ok(TiffRowWriter {
            out,
            writer,
            big,
            width,
            height,
            pixels,
            extra: extra
                .iter()
                .filter(|t| big || !matches!(t.field_type, 16..=18))
                .cloned()
                .collect(),
            software: software_at,
            data_start: head.len() as u64,
            rows_per_strip,
            rows_written: 0,
        })
    }

    /// True when the file is a BigTIFF.
    pub fn is_big(&self) -> bool {
        self.big
    }

    /// Appends whole rows (`width × samples` bytes each).
    pub fn write_rows(&mut self, bytes: &[u8]) -> Result<()> {
        let row_bytes = self.width * self.pixels.samples();
        if !bytes.len().is_multiple_of(row_bytes)
            || self.rows_written + bytes.len() / row_bytes > self.height
        {
            return Err(GroveError::input(
                self.out.path(),
                "TIFF rows do not match the image size",
            ));
        }
        self.rows_written += bytes.len() / row_bytes;
        self.writer
            .write_all(bytes)
            .map_err(|e| GroveError::write(self.out.path(), e))
    }

    /// Writes the tag values and the directory (all rows must have been written) and renames
    /// the file into place.
    pub fn finish(self) -> Result<()> {
        let path = self.out.path().to_path_buf();
        if self.rows_written != self.height {
            return Err(GroveError::input(
                &path,
                format!(
                    "TIFF incomplete: {} of {} rows written",
                    self.rows_written, self.height
                ),
            ));
        }
        let entries = self.entries();
        let big = self.big;
        let mut w = self.writer;
        let fail = |e: std::io::Error| GroveError::write(&path, e);
        let mut at = w.stream_position().map_err(fail)?;
        let inline = if big { 8 } else { 4 };
        // Out-of-line values first, each at a word boundary, then the directory.
        let mut placed: Vec<(Entry, Option<u64>)> = Vec::with_capacity(entries.len());
        for e in entries {
            if let Some(offset) = e.at {
                placed.push((e, Some(offset)));
            } else if e.data.len() > inline {
                if at % 2 == 1 {
                    w.write_all(&[0]).map_err(fail)?;
                    at += 1;
                }
                w.write_all(&e.data).map_err(fail)?;
                let offset = at;
                at += e.data.len() as u64;
                placed.push((e, Some(offset)));
            } else {
                placed.push((e, None));
            }
        }
        if at % 2 == 1 {
            w.write_all(&[0]).map_err(fail)?;
            at += 1;
        }
        let ifd = at;
        if !big && ifd > u32::MAX as u64 {
            return Err(GroveError::input(&path, "TIFF grew past 4 GiB"));
        }
        let mut dir = Vec::new();
        if big {
            dir.extend_from_slice(&(placed.len() as u64).to_le_bytes());
        } else {
            dir.extend_from_slice(&(placed.len() as u16).to_le_bytes());
        }
        for (e, offset) in &placed {
            dir.extend_from_slice(&e.tag.to_le_bytes());
            dir.extend_from_slice(&e.field_type.to_le_bytes());
            let mut value = match offset {
                Some(o) if big => o.to_le_bytes().to_vec(),
                Some(o) => (*o as u32).to_le_bytes().to_vec(),
                None => e.data.clone(),
            };
            value.resize(inline, 0);
            if big {
                dir.extend_from_slice(&e.count.to_le_bytes());
            } else {
                dir.extend_from_slice(&(e.count as u32).to_le_bytes());
            }
            dir.extend_from_slice(&value);
        }
        dir.extend_from_slice(&vec![0u8; inline]); // no next directory
        w.write_all(&dir).map_err(fail)?;
        w.seek(SeekFrom::Start(if big { 8 } else { 4 }))
            .map_err(fail)?;
        if big {
            w.write_all(&ifd.to_le_bytes()).map_err(fail)?;
        } else {
            w.write_all(&(ifd as u32).to_le_bytes()).map_err(fail)?;
        }
        w.into_inner().map_err(|e| fail(e.into_error()))?;
        self.out.commit()
    }

    /// Every directory entry, sorted by tag as TIFF requires.
    fn entries(&self) -> Vec<Entry> {
        let samples = self.pixels.samples();
        let row_bytes = (self.width * samples) as u64;
        let strips = self.height.div_ceil(self.rows_per_strip);
        let mut offsets = Vec::with_capacity(strips * 8);
        let mut counts = Vec::with_capacity(strips * 8);
        for s in 0..strips {
            let rows = self
                .rows_per_strip
                .min(self.height - s * self.rows_per_strip) as u64;
            let offset = self.data_start + s as u64 * self.rows_per_strip as u64 * row_bytes;
            if self.big {
                offsets.extend_from_slice(&offset.to_le_bytes());
                counts.extend_from_slice(&(rows * row_bytes).to_le_bytes());
            } else {
                offsets.extend_from_slice(&(offset as u32).to_le_bytes());
                counts.extend_from_slice(&((rows * row_bytes) as u32).to_le_bytes());
            }
        }
        let offset_type = if self.big { 16 } else { 4 };
        let photometric = match self.pixels {
            TiffPixels::Grey8 => 1,
            TiffPixels::Rgb8 => 2,
            TiffPixels::Palette(_) => 3,
        };
        let mut e = vec![
            long(256, self.width as u32),
            long(257, self.height as u32),
            shorts(258, &vec![8; samples]),
            shorts(259, &[1]), // no compression
            shorts(262, &[photometric]),
            Entry {
                tag: 273,
                field_type: offset_type,
                count: strips as u64,
                data: offsets,
                at: None,
            },
            shorts(277, &[samples as u16]),
            long(278, self.rows_per_strip as u32),
            Entry {
                tag: 279,
                field_type: offset_type,
                count: strips as u64,
                data: counts,
                at: None,
            },
            shorts(284, &[1]), // chunky
        ];
        // Software (305) was written after the header; point at it.
        let (sw_at, sw_len) = self.software;
        e.push(Entry {
            tag: 305,
            field_type: 2,
            count: sw_len,
            data: Vec::new(),
            at: Some(sw_at),
        });
        if let TiffPixels::Palette(pal) = &self.pixels {
            // TIFF 6.0, section 5: all reds, then all greens, then all blues, 16 bits each.
            let map: Vec<u16> = (0..3)
                .flat_map(|k| pal.iter().map(move |c| c[k] as u16 * 257))
                .collect();
            e.push(shorts(320, &map));
        }
        for t in &self.extra {
            e.retain(|x| x.tag != t.tag);
            e.push(Entry {
                tag: t.tag,
                field_type: t.field_type,
                count: t.count,
                data: t.data.clone(),
                at: None,
            });
        }
        // Baseline readers expect resolution tags; without the input's, "no unit, 1 per 1".
        for (tag, entry) in [
            (282, rational(282, 1, 1)),
            (283, rational(283, 1, 1)),
            (296, shorts(296, &[1])),
        ] {
            if !e.iter().any(|x| x.tag == tag) {
                e.push(entry);
            }
        }
        e.sort_by_key(|x| x.tag);
        debug_assert!(self.extra.iter().all(|t| type_size(t.field_type).is_some()));
        e
    }
}

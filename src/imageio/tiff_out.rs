//! A tiled, Deflate-compressed, little-endian TIFF written row by row (TIFF 6.0, sections
//! 2–5, 8 and 15 "Tiled Images"; Deflate = compression 8 as in the TIFF Technical Note
//! "Adobe Deflate"; BigTIFF as specified by Aware Systems' "BigTIFF File Format Proposal":
//! magic 43, 8-byte offsets, 20-byte directory entries).
//!
//! grove writes its own rather than using the `tiff` crate's encoder: that encoder can write
//! BigTIFF (`TiffEncoder::new_big`) and strip by strip (`ImageEncoder::write_strip`), but its
//! `ImageEncoder<'a, ..>` holds `&'a mut` of the `TiffEncoder` it came from, so it cannot be
//! kept open between the calls of a streamed apply without a self-referential struct or a
//! thread of its own; it writes no tiles and has no palette colour type, always writes its
//! own resolution tags first, and picks standard or BigTIFF by type rather than by the size
//! of the file. The `tiff` crate stays the reader.
//!
//! Tiles rather than strips so that a GIS or viewer can show any part of a huge map without
//! reading whole rows of it; rows are buffered until a row of tiles is complete (memory: one
//! tile side times the image width), then each tile is compressed (in parallel) and written.
//! Tile contents do not depend on how the rows arrived, so a streamed apply and a
//! whole-image one write the same bytes.
//!
//! Layout: header, the Software string (within the first 4 KiB, so `output_guard` knows the
//! file as grove's), the tiles as they are made, then every other tag value and the one
//! image directory; the header's directory offset is filled in last. The file lives under a
//! temporary name until `finish`.

use std::io::{BufWriter, Seek, SeekFrom, Write};
use std::path::Path;

use rayon::prelude::*;

use super::tiff_tags::{type_size, TiffTag};
use crate::atomic_write::AtomicFile;
use crate::error::{GroveError, Result};

/// What the pixels are.
#[derive(Clone, Debug)]
pub enum TiffPixels {
    /// One byte per pixel, an index into this colour map (photometric RGB Palette): label maps.
    /// 256 RGB triples, flattened.
    Palette(Vec<u8>),
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
    /// BigTIFF only when a standard TIFF could pass 4 GiB (its 32-bit offsets' limit).
    #[default]
    Auto,
    /// BigTIFF whatever the size (for readers that want it, and for tests).
    Big,
}

/// Tile side in pixels: 256 is common practice for tiled GeoTIFFs (GDAL's default block size
/// for tiled output), big enough for Deflate to work well, small enough that a viewer reads
/// little more than it shows. Images smaller than a tile get a smaller one (a multiple of 16,
/// which TIFF 6.0 section 15 requires), so a thumbnail is not padded to 256 × 256.
const TILE: usize = 256;

/// Room for the directory and the out-of-line tag values, beyond the tiles and tile tables,
/// when deciding whether a standard TIFF fits (generous: a colour map is 1.5 KiB,
/// passed-through tags are bounded by `tiff_tags`).
const TAG_ROOM: u64 = 16 << 20;

/// A TIFF being written (see the module documentation).
pub struct TiffRowWriter {
    out: AtomicFile,
    writer: BufWriter<std::fs::File>,
    /// Bytes written so far (the next tile's offset).
    at: u64,
    big: bool,
    width: usize,
    height: usize,
    pixels: TiffPixels,
    extra: Vec<TiffTag>,
    software: (u64, u64),
    tile: usize,
    /// Rows waiting for their row of tiles to fill.
    band: Vec<u8>,
    rows_written: usize,
    offsets: Vec<u64>,
    counts: Vec<u64>,
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

/// LONG offsets in a standard TIFF, LONG8 in a BigTIFF.
fn offsets_entry(tag: u16, big: bool, v: &[u64]) -> Entry {
    let data = if big {
        v.iter().flat_map(|x| x.to_le_bytes()).collect()
    } else {
        v.iter().flat_map(|&x| (x as u32).to_le_bytes()).collect()
    };
    Entry {
        tag,
        field_type: if big { 16 } else { 4 },
        count: v.len() as u64,
        data,
        at: None,
    }
}

/// The tile side for an image of `width × height`.
fn tile_side(width: usize, height: usize) -> usize {
    width.max(height).next_multiple_of(16).min(TILE)
}

/// True when a standard TIFF of these pixels could pass its 32-bit offsets' 4 GiB: the bound
/// assumes tiles that do not compress at all.
fn could_pass_4_gib(width: usize, height: usize, samples: usize) -> bool {
    let tile = tile_side(width, height);
    let tiles = (width.div_ceil(tile) * height.div_ceil(tile)) as u64;
    let tile_bytes = (tile * tile * samples) as u64;
    // zlib's worst case grows incompressible data by 5 bytes per 16 KiB block plus 6
    // (RFC 1950/1951 stored blocks); count 1 % and 64 bytes per tile to be safe.
    let bound = tiles * (tile_bytes + tile_bytes / 100 + 64) + 16 * tiles + TAG_ROOM;
    bound > u32::MAX as u64
}

/// zlib-compresses one tile (fast level: maps are mostly runs, and the speed matters more).
fn deflate(tile: &[u8]) -> Vec<u8> {
    let mut z = flate2::write::ZlibEncoder::new(
        Vec::with_capacity(tile.len() / 8),
        flate2::Compression::fast(),
    );
    z.write_all(tile).expect("writing to a Vec cannot fail");
    z.finish().expect("writing to a Vec cannot fail")
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
        let tile = tile_side(width, height);
        let tiles = width.div_ceil(tile) * height.div_ceil(tile);
        let big = flavour == TiffFlavour::Big || could_pass_4_gib(width, height, pixels.samples());
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
            at: head.len() as u64,
            big,
            width,
            height,
            extra: extra
                .iter()
                .filter(|t| big || !matches!(t.field_type, 16..=18))
                .cloned()
                .collect(),
            software: software_at,
            tile,
            band: Vec::with_capacity(tile * width * pixels.samples()),
            pixels,
            rows_written: 0,
            offsets: Vec::with_capacity(tiles),
            counts: Vec::with_capacity(tiles),
        })
    }

    /// True when the file is a BigTIFF.
    pub fn is_big(&self) -> bool {
        self.big
    }

    /// Appends whole rows (`width × samples` bytes each).
    pub fn write_rows(&mut self, mut bytes: &[u8]) -> Result<()> {
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
        let full = self.tile * row_bytes;
        while !bytes.is_empty() {
            let take = (full - self.band.len()).min(bytes.len());
            self.band.extend_from_slice(&bytes[..take]);
            bytes = &bytes[take..];
            if self.band.len() == full {
                self.flush_band()?;
            }
        }
        Ok(())
    }

    /// Writes the buffered rows as one row of tiles (the last one padded with zeros, as
    /// TIFF 6.0 section 15 wants every tile whole).
    fn flush_band(&mut self) -> Result<()> {
        let samples = self.pixels.samples();
        let row_bytes = self.width * samples;
        let rows = self.band.len() / row_bytes;
        let (t, band) = (self.tile, &self.band);
        let across = self.width.div_ceil(t);
        let tiles: Vec<Vec<u8>> = (0..across)
            .into_par_iter()
            .map(|tx| {
                let mut tile = vec![0u8; t * t * samples];
                let x0 = tx * t * samples;
                let len = (t * samples).min(row_bytes - x0);
                for y in 0..rows {
                    let src = &band[y * row_bytes + x0..][..len];
                    tile[y * t * samples..][..len].copy_from_slice(src);
                }
                deflate(&tile)
            })
            .collect();
        for z in tiles {
            self.writer
                .write_all(&z)
                .map_err(|e| GroveError::write(self.out.path(), e))?;
            self.offsets.push(self.at);
            self.counts.push(z.len() as u64);
            self.at += z.len() as u64;
        }
        self.band.clear();
        Ok(())
    }

    /// Writes the tag values and the directory (all rows must have been written) and renames
    /// the file into place.
    pub fn finish(mut self) -> Result<()> {
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
        if !self.band.is_empty() {
            self.flush_band()?;
        }
        let entries = self.entries();
        let big = self.big;
        let mut w = self.writer;
        let fail = |e: std::io::Error| GroveError::write(&path, e);
        let mut at = self.at;
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
        let photometric = match self.pixels {
            TiffPixels::Grey8 => 1,
            TiffPixels::Rgb8 => 2,
            TiffPixels::Palette(_) => 3,
        };
        let mut e = vec![
            long(256, self.width as u32),
            long(257, self.height as u32),
            shorts(258, &vec![8; samples]),
            shorts(259, &[8]), // Deflate
            shorts(262, &[photometric]),
            shorts(277, &[samples as u16]),
            shorts(284, &[1]), // chunky
            long(322, self.tile as u32),
            long(323, self.tile as u32),
            offsets_entry(324, self.big, &self.offsets),
            offsets_entry(325, self.big, &self.counts),
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
                .flat_map(|k| pal.chunks_exact(3).map(move |c| c[k] as u16 * 257))
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

#[cfg(test)]
mod tests {
    use super::*;

    fn read_back(path: &Path) -> (tiff::ColorType, Vec<u8>) {
        let mut d = tiff::decoder::Decoder::new(std::fs::File::open(path).unwrap()).unwrap();
        let colour = d.colortype().unwrap();
        match d.read_image().unwrap() {
            tiff::decoder::DecodingResult::U8(v) => (colour, v),
            _ => panic!("not 8-bit"),
        }
    }

    /// Read back with the `tiff` crate (an independent reader), in odd pieces and sizes that
    /// cross tile edges, standard and BigTIFF.
    #[test]
    fn rows_in_pieces_read_back_with_the_tiff_crate() {
        let dir = tempfile::tempdir().unwrap();
        for (w, h, pieces, flavour) in [
            (13usize, 9usize, 2usize, TiffFlavour::Auto),
            (300, 271, 7, TiffFlavour::Auto),
            (300, 271, 3, TiffFlavour::Big),
        ] {
            let path = dir.path().join(format!("m{w}{pieces}.tif"));
            let rgb: Vec<u8> = (0..w * h * 3).map(|i| (i * 7 % 251) as u8).collect();
            let mut wr =
                TiffRowWriter::create(&path, w, h, TiffPixels::Rgb8, &[], flavour).unwrap();
            assert_eq!(wr.is_big(), flavour == TiffFlavour::Big);
            let rows_per = h.div_ceil(pieces);
            for chunk in rgb.chunks(rows_per * w * 3) {
                wr.write_rows(chunk).unwrap();
            }
            wr.finish().unwrap();
            let (colour, back) = read_back(&path);
            assert_eq!(colour, tiff::ColorType::RGB(8));
            assert_eq!(back, rgb, "{w}×{h} in {pieces}");
        }
        // Nothing else is left in the folder (the temporaries were renamed).
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 3);
    }

    #[test]
    fn bigtiff_only_when_4_gib_could_be_passed() {
        // 3.6 GB of grey fits a standard TIFF even uncompressed; 4.4 GB does not.
        assert!(!could_pass_4_gib(60_000, 60_000, 1));
        assert!(could_pass_4_gib(66_000, 66_000, 1));
        // The same pixels as RGB take three times the room.
        assert!(could_pass_4_gib(40_000, 40_000, 3));
        assert!(!could_pass_4_gib(30_000, 30_000, 3));
    }

    #[test]
    fn palette_maps_keep_their_indices() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("l.tif");
        let ids: Vec<u8> = (0..40 * 20).map(|i| (i % 3) as u8).collect();
        let pal: Vec<u8> = (0..768).map(|i| (i % 256) as u8).collect();
        let mut wr = TiffRowWriter::create(
            &path,
            40,
            20,
            TiffPixels::Palette(pal),
            &[],
            TiffFlavour::Auto,
        )
        .unwrap();
        wr.write_rows(&ids).unwrap();
        wr.finish().unwrap();
        // The `tiff` crate does not read palette images; grove's label reader does.
        let back = crate::imageio::read_label_file(&path).unwrap();
        assert_eq!((back.width, back.height), (40, 20));
        match back.pixels {
            crate::imageio::LabelPixels::Values(v) => assert_eq!(v, ids),
            _ => panic!("palette label map read as colours"),
        }
    }

    #[test]
    fn unfinished_or_overfull_files_leave_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("g.tif");
        let mut wr =
            TiffRowWriter::create(&path, 4, 4, TiffPixels::Grey8, &[], TiffFlavour::Auto).unwrap();
        wr.write_rows(&[0; 8]).unwrap();
        assert!(wr.write_rows(&[0; 12]).is_err());
        assert!(wr.finish().is_err());
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}

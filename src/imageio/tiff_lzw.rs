//! A second decoder for LZW-compressed TIFF chunks, used only when the `tiff` crate (0.11.3)
//! refuses one.
//!
//! Measured here (tests/tiff_npy.rs, files written by tifffile + imagecodecs and read by
//! libtiff through Pillow without complaint): the `tiff` crate fails with "no lzw end code
//! found" on tiles at the right edge of an image whose width is not a multiple of the tile
//! width, while tiles of full width decode. Its edge-tile path asks the LZW stream for a
//! row at a time and skips the padding, and near the end of the stream that path gives up;
//! decoding the chunk in one call, as here, reads the same bytes to their end code. GIS tools
//! write exactly such files (LZW, tiled, any width), so grove must read them.
//!
//! LZW as TIFF 6.0 section 13 (MSB-first codes, the code width growing one code early), the
//! horizontal-differencing predictor as section 14.

use std::fs::File;
use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

use tiff::decoder::Decoder;
use tiff::tags::Tag;

/// How to undo a chunk's coding: what `decode_chunk` needs besides the bytes.
pub struct LzwChunks {
    offsets: Vec<u64>,
    counts: Vec<u64>,
    predictor: u16,
    big_endian: bool,
    /// Chunk width in pixels (the image width for strips) and samples per pixel.
    chunk_width: usize,
    samples: usize,
    wide: bool,
}

impl LzwChunks {
    /// `None` unless the image is LZW-compressed with no predictor or the horizontal one.
    pub fn of<R: Read + Seek>(
        decoder: &mut Decoder<R>,
        chunk_width: usize,
        samples: usize,
        wide: bool,
    ) -> Option<LzwChunks> {
        let compression = decoder.find_tag_unsigned::<u16>(Tag::Compression).ok()??;
        let predictor = decoder
            .find_tag_unsigned::<u16>(Tag::Predictor)
            .ok()?
            .unwrap_or(1);
        if compression != 5 || !matches!(predictor, 1 | 2) {
            return None;
        }
        let tiled = decoder.find_tag(Tag::TileOffsets).ok()?.is_some();
        let (offsets_tag, counts_tag) = if tiled {
            (Tag::TileOffsets, Tag::TileByteCounts)
        } else {
            (Tag::StripOffsets, Tag::StripByteCounts)
        };
        let offsets = decoder.get_tag_u64_vec(offsets_tag).ok()?;
        let counts = decoder.get_tag_u64_vec(counts_tag).ok()?;
        Some(LzwChunks {
            offsets,
            counts,
            predictor,
            big_endian: matches!(decoder.byte_order(), tiff::tags::ByteOrder::BigEndian),
            chunk_width,
            samples,
            wide,
        })
    }

    /// Chunk `index` (`rows` rows of the chunk width), cropped to `data_width` pixels per row:
    /// the samples `tiff::decoder::Decoder::read_chunk` gives for it. `None` when the chunk is
    /// damaged here too.
    pub fn decode_chunk(
        &self,
        path: &Path,
        index: usize,
        rows: usize,
        data_width: usize,
    ) -> Option<Vec<u16>> {
        let (&offset, &count) = (self.offsets.get(index)?, self.counts.get(index)?);
        let mut raw = vec![0u8; usize::try_from(count).ok()?];
        let mut file = File::open(path).ok()?;
        file.seek(SeekFrom::Start(offset)).ok()?;
        file.read_exact(&mut raw).ok()?;
        let bytes_per_sample = if self.wide { 2 } else { 1 };
        let row_samples = self.chunk_width * self.samples;
        let want = rows * row_samples * bytes_per_sample;
        let mut decoded = Vec::with_capacity(want);
        let mut lzw = weezl::decode::Decoder::with_tiff_size_switch(weezl::BitOrder::Msb, 8);
        // A stream may end without its end code (libtiff accepts that): enough bytes suffice.
        let _ = lzw.into_vec(&mut decoded).decode(&raw).status;
        if decoded.len() < want {
            return None;
        }
        let mut samples: Vec<u16> = if self.wide {
            decoded[..want]
                .chunks_exact(2)
                .map(|b| {
                    if self.big_endian {
                        u16::from_be_bytes([b[0], b[1]])
                    } else {
                        u16::from_le_bytes([b[0], b[1]])
                    }
                })
                .collect()
        } else {
            decoded[..want].iter().map(|&b| u16::from(b)).collect()
        };
        if self.predictor == 2 {
            for row in samples.chunks_exact_mut(row_samples) {
                undo_horizontal_differencing(row, self.samples, self.wide);
            }
        }
        let keep = data_width * self.samples;
        Some(
            samples
                .chunks_exact(row_samples)
                .flat_map(|row| row[..keep].iter().copied())
                .collect(),
        )
    }
}

/// Each sample was stored as the difference to the same sample of the pixel on its left,
/// modulo the sample's bit depth (TIFF 6.0, section 14).
fn undo_horizontal_differencing(row: &mut [u16], samples: usize, wide: bool) {
    for i in samples..row.len() {
        let sum = row[i].wrapping_add(row[i - samples]);
        row[i] = if wide { sum } else { sum & 0xFF };
    }
}

#[cfg(test)]
mod tests {
    use super::undo_horizontal_differencing;

    #[test]
    fn horizontal_differencing_wraps_at_the_bit_depth() {
        // TIFF 6.0 section 14: differences are stored modulo 2^bits.
        let mut r = [250, 10, 0xFFF0, 0x20];
        undo_horizontal_differencing(&mut r[..2], 1, false);
        assert_eq!(&r[..2], &[250, 4]);
        undo_horizontal_differencing(&mut r[2..], 1, true);
        assert_eq!(&r[2..], &[0xFFF0, 0x0010]);
        // Two samples per pixel: each follows its own channel.
        let mut rgb = [1, 2, 3, 4, 5, 6];
        undo_horizontal_differencing(&mut rgb, 2, false);
        assert_eq!(rgb, [1, 2, 4, 6, 9, 12]);
    }
}

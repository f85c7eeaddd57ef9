//! Writing an image a few rows at a time (label maps, overlays, confidence and probability
//! maps of an image too large to hold), through the same temporary-name-and-rename rule as
//! every other output.

use std::io::Write;
use std::path::Path;

use crate::atomic_write::AtomicFile;
use crate::error::{GroveError, Result};

/// An 8-bit PNG (grey, RGB or palette-indexed) written row by row with the `png` crate's
/// stream writer.
pub struct PngRowWriter {
    out: AtomicFile,
    stream: png::StreamWriter<'static, std::fs::File>,
}

/// IDAT chunk size: large chunks keep the system calls few.
const CHUNK: usize = 1 << 20;

impl PngRowWriter {
    pub fn create(
        path: &Path,
        width: usize,
        height: usize,
        color: png::ColorType,
        palette: Option<Vec<u8>>,
    ) -> Result<PngRowWriter> {
        let out = AtomicFile::create(path)?;
        let bad = |e: png::EncodingError| GroveError::input(path, format!("cannot write PNG: {e}"));
        let mut enc = png::Encoder::new(out.handle()?, width as u32, height as u32);
        enc.set_color(color);
        enc.set_depth(png::BitDepth::Eight);
        // Same fast compression as the whole-image writer (see `encode_png`).
        enc.set_compression(png::Compression::Fast);
        if let Some(p) = palette {
            enc.set_palette(p);
        }
        // Marks the file as grove's own, as `encode_png` does (see `output_guard`).
        enc.add_text_chunk("Software".into(), crate::output_guard::generator())
            .map_err(bad)?;
        let stream = enc
            .write_header()
            .map_err(bad)?
            .into_stream_writer_with_size(CHUNK)
            .map_err(bad)?;
        Ok(PngRowWriter { out, stream })
    }

    /// Appends whole rows (`width × samples` bytes each).
    pub fn write_rows(&mut self, bytes: &[u8]) -> Result<()> {
        self.stream
            .write_all(bytes)
            .map_err(|e| GroveError::write(self.out.path(), e))
    }

    /// Completes the file (all rows must have been written) and renames it into place.
    pub fn finish(self) -> Result<()> {
        let path = self.out.path().to_path_buf();
        self.stream
            .finish()
            .map_err(|e| GroveError::input(&path, format!("cannot write PNG: {e}")))?;
        // The encoder writes the closing IEND chunk when it is dropped and cannot report a
        // failure there, so check that it arrived.
        let tail = self.out.tail(8)?;
        if &tail[..4] != b"IEND" {
            return Err(GroveError::input(&path, "PNG could not be completed"));
        }
        self.out.commit()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rows_written_in_pieces_read_back_whole() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.png");
        let (w, h) = (13usize, 9usize);
        let rgb: Vec<u8> = (0..w * h * 3).map(|i| (i * 7 % 256) as u8).collect();
        let mut wr = PngRowWriter::create(&path, w, h, png::ColorType::Rgb, None).unwrap();
        wr.write_rows(&rgb[..4 * w * 3]).unwrap();
        wr.write_rows(&rgb[4 * w * 3..]).unwrap();
        wr.finish().unwrap();
        let back = image::open(&path).unwrap().into_rgb8();
        assert_eq!(back.as_raw(), &rgb);
        // Nothing else is left in the folder (the temporary was renamed).
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn unfinished_file_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.png");
        let mut wr = PngRowWriter::create(&path, 4, 4, png::ColorType::Grayscale, None).unwrap();
        wr.write_rows(&[0; 8]).unwrap();
        assert!(wr.finish().is_err());
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}

//! `.npy` arrays of float32 probabilities, for users who continue in Python (`numpy.load`).
//!
//! Written to the published NPY format, version 1.0 (numpy's `numpy.lib.format` documentation,
//! "NPY format"): the magic `\x93NUMPY`, version bytes 1 0, a little-endian u16 header
//! length, then an ASCII Python dict literal (`descr`, `fortran_order`, `shape`) padded with
//! spaces and ended by `\n` so that the data starts at a multiple of 64 bytes, then the data
//! in C order. The header is padded exactly as numpy pads it (including the spare room
//! numpy leaves after the dict so the first axis can grow in place), so grove's file is
//! byte-for-byte the one `numpy.save` writes for the same array (checked in
//! `tests/tiff_npy.rs` against a fixture made by numpy).
//!
//! The header goes first and the rows follow as they are produced, so a streamed apply can
//! write an image's probabilities without holding them; the file lives under a temporary
//! name until it is complete.

use std::io::{BufWriter, Write};
use std::path::Path;

use crate::atomic_write::AtomicFile;
use crate::error::{GroveError, Result};

/// numpy's `ARRAY_ALIGN`: the data starts at a multiple of this.
const ALIGN: usize = 64;
/// numpy's `GROWTH_AXIS_MAX_DIGITS`: spare header room so the first axis can grow in place.
const GROWTH_AXIS_MAX_DIGITS: usize = 21;
/// Magic string + version (1, 0) + u16 header length.
const PREAMBLE: usize = 6 + 2 + 2;

/// The complete header (preamble + padded dict) of a little-endian float32 C-order array of
/// `shape`, as numpy writes it.
pub fn f32_header(shape: &[usize]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(usize::to_string).collect();
    // Python's repr of a tuple: "(5,)" for one element.
    let tuple = match dims.len() {
        1 => format!("({},)", dims[0]),
        _ => format!("({})", dims.join(", ")),
    };
    let mut dict = format!("{{'descr': '<f4', 'fortran_order': False, 'shape': {tuple}, }}");
    if let Some(first) = dims.first() {
        dict.push_str(&" ".repeat(GROWTH_AXIS_MAX_DIGITS.saturating_sub(first.len())));
    }
    let unpadded = PREAMBLE + dict.len() + 1;
    // numpy adds a full ALIGN of spaces when the header is already aligned; so do we.
    let pad = ALIGN - unpadded % ALIGN;
    let header_len = dict.len() + pad + 1;
    let mut out = Vec::with_capacity(PREAMBLE + header_len);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header_len as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.resize(out.len() + pad, b' ');
    out.push(b'\n');
    out
}

/// A float32 `.npy` file written a few rows at a time: `create` writes the header, each
/// `write` appends values in C order, `finish` checks that every value arrived and renames
/// the file into place.
pub struct NpyWriter {
    out: AtomicFile,
    writer: BufWriter<std::fs::File>,
    expected: u64,
    written: u64,
}

impl NpyWriter {
    pub fn create(path: &Path, shape: &[usize]) -> Result<NpyWriter> {
        let out = AtomicFile::create(path)?;
        let mut writer = BufWriter::with_capacity(1 << 20, out.handle()?);
        writer
            .write_all(&f32_header(shape))
            .map_err(|e| GroveError::write(path, e))?;
        Ok(NpyWriter {
            out,
            writer,
            expected: shape.iter().map(|&d| d as u64).product(),
            written: 0,
        })
    }

    /// Appends `values` (the next values in C order).
    pub fn write(&mut self, values: &[f32]) -> Result<()> {
        self.written += values.len() as u64;
        if self.written > self.expected {
            return Err(GroveError::input(
                self.out.path(),
                "more values than the array's shape holds",
            ));
        }
        let mut bytes = Vec::with_capacity(values.len() * 4);
        for v in values {
            bytes.extend_from_slice(&v.to_le_bytes());
        }
        self.writer
            .write_all(&bytes)
            .map_err(|e| GroveError::write(self.out.path(), e))
    }

    /// Completes the file (every value must have been written) and renames it into place.
    pub fn finish(self) -> Result<()> {
        let path = self.out.path().to_path_buf();
        if self.written != self.expected {
            return Err(GroveError::input(
                &path,
                format!(
                    "array incomplete: {} of {} values written",
                    self.written, self.expected
                ),
            ));
        }
        self.writer
            .into_inner()
            .map_err(|e| GroveError::write(&path, e.into_error()))?;
        self.out.commit()
    }
}

/// Writes a whole float32 array of `shape` (C order).
pub fn write_npy_f32(path: &Path, shape: &[usize], values: &[f32]) -> Result<()> {
    let mut w = NpyWriter::create(path, shape)?;
    w.write(values)?;
    w.finish()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_is_aligned_and_ends_in_newline() {
        for shape in [&[1usize][..], &[2, 3, 4], &[40000, 70000, 12]] {
            let h = f32_header(shape);
            assert_eq!(h.len() % ALIGN, 0, "{shape:?}");
            assert_eq!(*h.last().unwrap(), b'\n');
            let len = u16::from_le_bytes([h[8], h[9]]) as usize;
            assert_eq!(len + PREAMBLE, h.len());
        }
        let one = String::from_utf8(f32_header(&[5])[PREAMBLE..].to_vec()).unwrap();
        assert!(one.contains("'shape': (5,), }"), "{one}");
    }

    #[test]
    fn short_or_long_arrays_are_refused_and_leave_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("p.npy");
        let mut w = NpyWriter::create(&path, &[2, 2, 1]).unwrap();
        w.write(&[0.0; 3]).unwrap();
        assert!(w.finish().is_err());
        let mut w = NpyWriter::create(&path, &[1, 1, 1]).unwrap();
        assert!(w.write(&[0.0; 2]).is_err());
        drop(w);
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}

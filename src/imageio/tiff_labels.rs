//! Label files in TIFF (such as grove's own `--map-format tiff` label maps): palette and grey
//! TIFFs give their values (class ids), RGB(A) TIFFs their colours, as label PNGs do.
//! Read with the `tiff` crate (which reads BigTIFF, strips and tiles); palette TIFFs, which
//! that crate refuses (0.11: "RGBPalette unsupported"), are read as grey (their indices) from
//! a copy whose photometric tag says so.

use std::io::Cursor;

use super::{LabelFile, LabelPixels};
use crate::image_check::size_problem;

fn tiff_error(e: tiff::TiffError) -> String {
    format!("cannot decode label TIFF: {e}")
}

/// Width and height from a label TIFF's directory, without decoding the pixels.
pub fn probe_label_tiff(
    file: impl std::io::Read + std::io::Seek,
) -> Result<(usize, usize), String> {
    let mut d = tiff::decoder::Decoder::new(file).map_err(tiff_error)?;
    let (w, h) = d.dimensions().map_err(tiff_error)?;
    Ok((w as usize, h as usize))
}

/// For a palette TIFF (PhotometricInterpretation 3, TIFF 6.0 section 5): a copy that says
/// BlackIsZero (1) instead, so its pixels are read as the indices they are.
fn palette_as_grey(bytes: &[u8]) -> Result<Option<Vec<u8>>, String> {
    const PHOTOMETRIC: u16 = 262;
    let Some((at, tag)) = super::tiff_tags::find_entry(bytes, PHOTOMETRIC)? else {
        return Ok(None);
    };
    if tag.field_type != 3 || tag.data.get(..2) != Some(&[3, 0]) {
        return Ok(None);
    }
    // The SHORT value sits inline after tag (2), type (2) and count (4 or 8 bytes).
    let big = bytes.get(2..4) == Some(&[43, 0]) || bytes.get(2..4) == Some(&[0, 43]);
    let value_at = at + if big { 12 } else { 8 };
    let little = bytes.starts_with(b"II");
    let mut copy = bytes.to_vec();
    let one: [u8; 2] = if little {
        1u16.to_le_bytes()
    } else {
        1u16.to_be_bytes()
    };
    copy[value_at..value_at + 2].copy_from_slice(&one);
    Ok(Some(copy))
}

/// Decodes a label TIFF's first image (8- or 16-bit, one channel or RGB(A), chunky).
pub fn decode_label_tiff(bytes: &[u8]) -> Result<LabelFile, String> {
    use tiff::decoder::{Decoder, DecodingResult as D, Limits};
    use tiff::ColorType as T;
    let indices = palette_as_grey(bytes)?;
    let bytes = indices.as_deref().unwrap_or(bytes);
    let mut d = Decoder::new(Cursor::new(bytes))
        .map_err(tiff_error)?
        // grove's own size check (below) replaces the crate's fixed limits.
        .with_limits(Limits::unlimited());
    let (w, h) = d.dimensions().map_err(tiff_error)?;
    if let Some(problem) = size_problem(w as u64, h as u64) {
        return Err(problem);
    }
    let colour = d.colortype().map_err(tiff_error)?;
    let channels = match colour {
        T::Gray(8 | 16) | T::Palette(8) => 1,
        T::GrayA(8 | 16) => 2,
        T::RGB(8 | 16) => 3,
        T::RGBA(8 | 16) => 4,
        other => {
            return Err(format!(
                "label TIFF has {other:?} pixels; label files need 8-bit palette or grey, or 8/16-bit RGB(A)"
            ))
        }
    };
    let values: Vec<u16> = match d.read_image().map_err(tiff_error)? {
        D::U8(v) => v.into_iter().map(u16::from).collect(),
        D::U16(v) => v,
        _ => return Err("label TIFF has an unsupported sample type".into()),
    };
    let n = w as usize * h as usize;
    if values.len() < n * channels {
        return Err("label TIFF holds fewer pixels than its size".into());
    }
    let wide = matches!(
        colour,
        T::Gray(16) | T::GrayA(16) | T::RGB(16) | T::RGBA(16)
    );
    let to8 = |v: u16| if wide { (v >> 8) as u8 } else { v as u8 };
    let pixels = match channels {
        1 => {
            if values.iter().any(|&v| v > 255) {
                return Err(
                    "16-bit label values above 255 are not supported (class ids are 0..254)".into(),
                );
            }
            LabelPixels::Values(values[..n].iter().map(|&v| v as u8).collect())
        }
        2 => LabelPixels::Values(
            values
                .chunks_exact(2)
                .take(n)
                .map(|p| if p[1] == 0 { 255 } else { p[0].min(255) as u8 })
                .collect(),
        ),
        _ => LabelPixels::Colours(
            values
                .chunks_exact(channels)
                .take(n)
                .map(|p| {
                    let a = if channels == 4 { to8(p[3]) } else { 255 };
                    [to8(p[0]), to8(p[1]), to8(p[2]), a]
                })
                .collect(),
        ),
    };
    Ok(LabelFile {
        width: w as usize,
        height: h as usize,
        pixels,
    })
}

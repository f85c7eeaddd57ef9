//! The resolution and georeferencing tags of an input TIFF, carried over unchanged onto the
//! output maps of the same size (so a label map lines up with its orthomosaic in a GIS).
//! grove does not interpret them: it copies their type, count and values (TIFF 6.0, section 2
//! "Image File Directory"; GeoTIFF 1.0, section 2.4 for the GeoTIFF tag numbers).
//!
//! Read with a small IFD parser of its own rather than the `tiff` crate's tag reader, which
//! returns decoded values without their on-disk type (SHORT vs LONG, RATIONAL vs DOUBLE) and
//! so could not write them back as they were.

use std::io::{Read, Seek, SeekFrom};
use std::path::Path;

use crate::error::{GroveError, Result};

/// Tags copied from an input TIFF onto its output maps: XResolution, YResolution,
/// ResolutionUnit (TIFF 6.0) and ModelPixelScale, ModelTiepoint, ModelTransformation,
/// GeoKeyDirectory, GeoDoubleParams, GeoAsciiParams (GeoTIFF 1.0).
pub const PASS_THROUGH: [u16; 9] = [282, 283, 296, 33550, 33922, 34264, 34735, 34736, 34737];

/// The values of one tag longer than this are not copied (a damaged file could announce
/// gigabytes; real georeferencing is a few hundred bytes).
const MAX_TAG_BYTES: u64 = 1 << 20;

/// One tag as stored: its TIFF field type, value count and values in little-endian order.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TiffTag {
    pub tag: u16,
    pub field_type: u16,
    pub count: u64,
    pub data: Vec<u8>,
}

/// Bytes per value of a TIFF field type and the size of the unit to byte-swap (rationals are
/// two 4-byte integers); `None` for types this reader does not know.
pub(crate) fn type_size(field_type: u16) -> Option<(usize, usize)> {
    Some(match field_type {
        1 | 2 | 6 | 7 => (1, 1),     // BYTE, ASCII, SBYTE, UNDEFINED
        3 | 8 => (2, 2),             // SHORT, SSHORT
        4 | 9 | 11 | 13 => (4, 4),   // LONG, SLONG, FLOAT, IFD
        5 | 10 => (8, 4),            // RATIONAL, SRATIONAL
        12 | 16 | 17 | 18 => (8, 8), // DOUBLE, LONG8, SLONG8, IFD8 (BigTIFF)
        _ => return None,
    })
}

/// The pass-through tags of the first image of the TIFF at `path`, or none when the file is
/// not a TIFF. A TIFF whose directory cannot be read is an error naming the file.
pub fn read_pass_through_tags(path: &Path) -> Result<Vec<TiffTag>> {
    let mut f = std::fs::File::open(path).map_err(|e| GroveError::io(path, e))?;
    let mut head = [0u8; 16];
    let n = read_up_to(&mut f, &mut head).map_err(|e| GroveError::io(path, e))?;
    let little = match &head[..2] {
        b"II" => true,
        b"MM" => false,
        _ => return Ok(Vec::new()),
    };
    if n < 8 {
        return Ok(Vec::new());
    }
    let tags = parse(&mut f, &head, little, |t| PASS_THROUGH.contains(&t))
        .map_err(|m| GroveError::input(path, m))?;
    Ok(tags.into_iter().map(|(_, t)| t).collect())
}

/// The first image's entry for `tag` in the TIFF `bytes` (either byte order, TIFF or
/// BigTIFF): where the entry starts, and the tag as stored (values little-endian).
pub fn find_entry(bytes: &[u8], tag: u16) -> std::result::Result<Option<(usize, TiffTag)>, String> {
    let mut head = [0u8; 16];
    let n = bytes.len().min(16);
    head[..n].copy_from_slice(&bytes[..n]);
    let little = match &head[..2] {
        b"II" => true,
        b"MM" => false,
        _ => return Ok(None),
    };
    let mut f = std::io::Cursor::new(bytes);
    let found = parse(&mut f, &head, little, |t| t == tag)?;
    Ok(found.into_iter().next().map(|(at, t)| (at as usize, t)))
}

fn read_up_to(f: &mut impl Read, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match f.read(&mut buf[n..])? {
            0 => break,
            k => n += k,
        }
    }
    Ok(n)
}

/// The entries of the first directory whose tag `wanted` accepts, each with the file offset
/// where its entry starts.
fn parse<R: Read + Seek>(
    f: &mut R,
    head: &[u8; 16],
    little: bool,
    wanted: impl Fn(u16) -> bool,
) -> std::result::Result<Vec<(u64, TiffTag)>, String> {
    let u16_at = |b: &[u8]| {
        let a = [b[0], b[1]];
        if little {
            u16::from_le_bytes(a)
        } else {
            u16::from_be_bytes(a)
        }
    };
    let u32_at = |b: &[u8]| {
        let a = [b[0], b[1], b[2], b[3]];
        if little {
            u32::from_le_bytes(a)
        } else {
            u32::from_be_bytes(a)
        }
    };
    let u64_at = |b: &[u8]| {
        let a: [u8; 8] = b[..8].try_into().unwrap();
        if little {
            u64::from_le_bytes(a)
        } else {
            u64::from_be_bytes(a)
        }
    };
    let big = match u16_at(&head[2..]) {
        42 => false,
        43 => true,
        _ => return Ok(Vec::new()),
    };
    let io = |e: std::io::Error| match e.kind() {
        std::io::ErrorKind::UnexpectedEof => {
            "the file is truncated or damaged: its TIFF directory lies beyond its end".to_string()
        }
        _ => format!("cannot read the TIFF directory: {e}"),
    };
    let ifd = if big {
        u64_at(&head[8..])
    } else {
        u32_at(&head[4..]) as u64
    };
    f.seek(SeekFrom::Start(ifd)).map_err(io)?;
    let count = if big {
        let mut b = [0u8; 8];
        f.read_exact(&mut b).map_err(io)?;
        u64_at(&b)
    } else {
        let mut b = [0u8; 2];
        f.read_exact(&mut b).map_err(io)?;
        u16_at(&b) as u64
    };
    let entry_len = if big { 20 } else { 12 };
    let table_len = count
        .checked_mul(entry_len)
        .filter(|&n| n <= MAX_TAG_BYTES)
        .ok_or("TIFF directory announces too many entries")?;
    let table_at = ifd + if big { 8 } else { 2 };
    let mut table = vec![0u8; table_len as usize];
    f.read_exact(&mut table).map_err(io)?;
    let mut tags = Vec::new();
    for (i, e) in table.chunks_exact(entry_len as usize).enumerate() {
        let tag = u16_at(e);
        if !wanted(tag) {
            continue;
        }
        let field_type = u16_at(&e[2..]);
        let Some((size, unit)) = type_size(field_type) else {
            continue;
        };
        let (n, inline) = if big {
            (u64_at(&e[4..]), &e[12..20])
        } else {
            (u32_at(&e[4..]) as u64, &e[8..12])
        };
        let len = n
            .checked_mul(size as u64)
            .filter(|&l| l <= MAX_TAG_BYTES)
            .ok_or_else(|| format!("TIFF tag {tag} announces too many values ({n})"))?;
        let mut data = vec![0u8; len as usize];
        if len as usize <= inline.len() {
            data.copy_from_slice(&inline[..len as usize]);
        } else {
            let at = if big {
                u64_at(inline)
            } else {
                u32_at(inline) as u64
            };
            f.seek(SeekFrom::Start(at)).map_err(io)?;
            f.read_exact(&mut data).map_err(|_| {
                format!("TIFF tag {tag}: its values lie beyond the end of the file")
            })?;
        }
        if !little {
            data.chunks_exact_mut(unit).for_each(<[u8]>::reverse);
        }
        let entry_at = table_at + i as u64 * entry_len;
        tags.push((
            entry_at,
            TiffTag {
                tag,
                field_type,
                count: n,
                data,
            },
        ));
    }
    Ok(tags)
}

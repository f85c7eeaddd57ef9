//! Checks made on an image file before and after decoding, so that a broken or oversized file
//! fails with a message instead of an abort, a panic or a quietly wrong picture.
//!
//! * **Size, before allocating.** Every reader looks at the header first and refuses an image
//!   above [`max_pixels`]: by default what the available memory allows for grove's per-pixel
//!   working set ([`BYTES_PER_PIXEL`]), raised or lowered with `--max-megapixels`.
//! * **Truncation.** Decoders can be lenient: a JPEG cut in half decodes with its missing
//!   part grey. A JPEG's main scan must be followed by its end-of-image marker; PNG and TIFF
//!   decoders report a short file as an early end, which is reworded here.
//! * **Messages.** Decoder errors are translated into what the user can do (empty file,
//!   unsupported pixel format with the supported ones, truncated file).

use std::path::Path;
use std::sync::atomic::{AtomicU64, Ordering};

use crate::error::{GroveError, Result};

/// Memory per pixel that segmenting an image takes with the default model: ~80 f32 feature
/// planes (filter bank + position + texton histograms) plus the image, probabilities and
/// outputs. Measured with `/usr/bin/time -v grove apply` (the demo's default model, one
/// 2048 × 2048 image): peak resident set 1.45 GB = 354 bytes per pixel; 450 leaves headroom
/// for models with more scales or textons.
pub const BYTES_PER_PIXEL: u64 = 450;

/// 0 = not set: derive from available memory.
static MAX_PIXELS: AtomicU64 = AtomicU64::new(0);

/// Sets the largest image accepted, in pixels (the `--max-megapixels` option; tiling may
/// raise it for commands that no longer hold a whole image's features).
pub fn set_max_pixels(pixels: u64) {
    MAX_PIXELS.store(pixels.max(1), Ordering::Relaxed);
}

/// Bytes of memory available now (`MemAvailable` of /proc/meminfo), if known.
pub fn available_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib * 1024)
}

/// Largest image accepted, in pixels: the value set with [`set_max_pixels`], or available
/// memory / [`BYTES_PER_PIXEL`] (at least 16 megapixels, so a busy machine still reads
/// ordinary photos; 100 megapixels if the available memory is unknown).
pub fn max_pixels() -> u64 {
    match MAX_PIXELS.load(Ordering::Relaxed) {
        0 => available_memory()
            .map(|m| (m / BYTES_PER_PIXEL).max(16_000_000))
            .unwrap_or(100_000_000),
        n => n,
    }
}

/// The limit given with `--max-megapixels`, if any. Images that `apply` streams need memory
/// by the tile, not by the image, so only a limit the user asked for applies to them.
pub fn explicit_max_pixels() -> Option<u64> {
    match MAX_PIXELS.load(Ordering::Relaxed) {
        0 => None,
        n => Some(n),
    }
}

/// Refuses a streamed image above an explicit `--max-megapixels` ([`explicit_max_pixels`]).
pub fn check_streamed_size(path: &Path, width: u64, height: u64) -> Result<()> {
    let pixels = width.saturating_mul(height);
    match explicit_max_pixels() {
        Some(limit) if pixels > limit => Err(GroveError::input(
            path,
            format!(
                "image is {width}x{height} ({} megapixels), above --max-megapixels {}",
                megapixels(pixels),
                megapixels(limit)
            ),
        )),
        _ => Ok(()),
    }
}

/// 47.9, or 0.001 for small limits.
fn megapixels(pixels: u64) -> String {
    let mp = pixels as f64 / 1e6;
    if mp < 1.0 {
        format!("{mp:.3}")
    } else {
        format!("{mp:.1}")
    }
}

/// "4500.0 GB", or "12.3 MB" below a gigabyte (so a small image never reads "0.0 GB").
fn gib(bytes: u64) -> String {
    if bytes < 1_000_000_000 {
        format!("{:.1} MB", bytes as f64 / 1e6)
    } else {
        format!("{:.1} GB", bytes as f64 / 1e9)
    }
}

/// Refuses an image of `width` × `height` above [`max_pixels`], before anything is allocated.
pub fn check_size(path: &Path, width: u64, height: u64) -> Result<()> {
    match size_problem(width, height) {
        Some(m) => Err(GroveError::input(path, m)),
        None => Ok(()),
    }
}

/// What is wrong with an image of `width` × `height`, if anything (no pixels, too large).
pub fn size_problem(width: u64, height: u64) -> Option<String> {
    if width == 0 || height == 0 {
        return Some(format!("image is {width}x{height}: it has no pixels"));
    }
    let pixels = width.saturating_mul(height);
    let limit = max_pixels();
    if pixels > limit {
        return Some(format!(
                "image is {width}x{height} ({} megapixels), above the limit of {} megapixels; segmenting it would need about {} of memory ({} available). Crop or downscale it, or raise the limit with --max-megapixels (grove apply reads PNG and TIFF images in pieces, with --tile > 0, and needs no such memory for them)",
                megapixels(pixels),
                megapixels(limit),
                gib(pixels.saturating_mul(BYTES_PER_PIXEL)),
                available_memory().map_or("unknown".to_string(), gib),
        ));
    }
    None
}

/// Refuses a JPEG whose data stops before the end-of-image marker (the last start-of-scan
/// marker must be followed by `FF D9`). Inside scan data a `FF` byte is always followed by
/// `00` or a restart marker (ITU T.81, B.1.1.5), so neither marker can appear by chance;
/// an EXIF thumbnail's own end marker comes before the main image's scans.
pub fn check_jpeg_complete(path: &Path, bytes: &[u8]) -> Result<()> {
    let last_scan = bytes.windows(2).rposition(|w| w == [0xFF, 0xDA]);
    let complete = last_scan.is_some_and(|s| bytes[s..].windows(2).any(|w| w == [0xFF, 0xD9]));
    if !complete {
        return Err(GroveError::input(
            path,
            "JPEG is truncated or damaged: its image data ends before the end-of-image marker (copy the file again from its source)",
        ));
    }
    Ok(())
}

const TRUNCATED: &str = "the file is truncated or damaged: it ends before all of its pixel data (copy it again from its source)";

/// True when a decoder's message means the file ended early (the decoders say it in
/// several ways).
fn says_truncated(text: &str) -> bool {
    let lower = text.to_ascii_lowercase();
    text.contains("fill whole buffer")
        || lower.contains("unexpected end")
        || lower.contains("eof")
        || lower.contains("not have enough data")
}

/// A streaming decoder's error (`format` names the format) in the words of
/// [`describe_decode_error`], so a damaged file reads the same on both paths.
pub fn describe_stream_error(format: &str, text: &str) -> String {
    if says_truncated(text) {
        TRUNCATED.into()
    } else {
        format!("cannot decode {format}: {text}")
    }
}

/// A decoder error in words a user can act on.
pub fn describe_decode_error(e: &image::ImageError, file_len: usize) -> String {
    use image::ImageError as E;
    if file_len == 0 {
        return "the file is empty (0 bytes)".into();
    }
    let text = e.to_string();
    let truncated = match e {
        E::IoError(io) => io.kind() == std::io::ErrorKind::UnexpectedEof,
        _ => false,
    } || says_truncated(&text);
    if truncated {
        return TRUNCATED.into();
    }
    match e {
        E::Unsupported(u) => format!(
            "unsupported image kind ({u}); grove reads PNG, JPEG and TIFF with 8- or 16-bit grey, grey+alpha, RGB or RGBA pixels (convert other kinds, e.g. float TIFFs, to 16-bit)"
        ),
        _ => format!("cannot decode image: {text}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn size_limit_names_size_limit_and_option() {
        let err = check_size(Path::new("big.png"), 100_000, 100_000)
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("big.png")
                && err.contains("100000x100000")
                && err.contains("--max-megapixels"),
            "{err}"
        );
        check_size(Path::new("ok.png"), 1000, 1000).unwrap();
        assert!(check_size(Path::new("e.png"), 0, 10).is_err());
    }

    #[test]
    fn jpeg_end_marker_after_the_last_scan_is_required() {
        let p = Path::new("x.jpg");
        // SOI, thumbnail scan + EOI, main scan, data, EOI.
        let whole = [
            0xFF, 0xD8, 0xFF, 0xDA, 1, 0xFF, 0xD9, 0xFF, 0xDA, 2, 3, 0xFF, 0xD9,
        ];
        check_jpeg_complete(p, &whole).unwrap();
        assert!(check_jpeg_complete(p, &whole[..10]).is_err());
        assert!(check_jpeg_complete(p, &whole[..4]).is_err());
    }
}

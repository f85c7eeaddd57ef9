//! Reading images into f32 planes and writing grove's outputs.
//!
//! Inputs: PNG, JPEG or TIFF, 8- or 16-bit, grey, grey+alpha, RGB or RGBA. Alpha is dropped
//! (it carries no appearance), 16-bit is scaled by 1/65535 so a model trained on 8-bit data
//! sees the same range. Outputs are written to a temporary name in the target folder and
//! renamed, so an interrupted run never leaves half a file behind.

use std::io::Cursor;
use std::path::{Path, PathBuf};

use image::DynamicImage;

use crate::error::{GroveError, Result};
use crate::image_check::{check_jpeg_complete, check_size, describe_decode_error, size_problem};

pub mod npy;
pub mod stream;
pub mod stream_out;
pub mod tiff_labels;
pub mod tiff_lzw;
pub mod tiff_out;
pub mod tiff_tags;
use crate::plane::Plane;

/// An input image as sRGB-encoded planes in [0, 1]: one plane (grey) or three (R, G, B).
#[derive(Clone, Debug)]
pub struct RasterImage {
    pub width: usize,
    pub height: usize,
    pub channels: Vec<Plane>,
}

impl RasterImage {
    pub fn is_grey(&self) -> bool {
        self.channels.len() == 1
    }

    /// The same image with three channels (grey replicated), for RGB-trained models.
    pub fn to_rgb(&self) -> RasterImage {
        if self.is_grey() {
            RasterImage {
                width: self.width,
                height: self.height,
                channels: vec![self.channels[0].clone(); 3],
            }
        } else {
            self.clone()
        }
    }

    /// A copy of the pixels in `rect` (which must lie inside the image).
    pub fn crop(&self, rect: &crate::features::stack::Rect) -> RasterImage {
        assert!(
            rect.x + rect.width <= self.width && rect.y + rect.height <= self.height,
            "crop rectangle inside the image"
        );
        let channels = self
            .channels
            .iter()
            .map(|p| {
                let mut data = Vec::with_capacity(rect.area());
                for y in rect.y..rect.y + rect.height {
                    data.extend_from_slice(&p.row(y)[rect.x..rect.x + rect.width]);
                }
                Plane::from_vec(rect.width, rect.height, data)
            })
            .collect();
        RasterImage {
            width: rect.width,
            height: rect.height,
            channels,
        }
    }

    /// 8-bit RGB bytes (grey replicated), the base layer of overlays.
    pub fn to_rgb8(&self) -> Vec<u8> {
        let n = self.width * self.height;
        let mut out = vec![0u8; n * 3];
        for (c, px) in out.chunks_exact_mut(3).enumerate() {
            for (k, v) in px.iter_mut().enumerate() {
                let plane = &self.channels[if self.is_grey() { 0 } else { k }];
                *v = (plane.data[c] * 255.0).round().clamp(0.0, 255.0) as u8;
            }
        }
        out
    }
}

/// Extensions recognised as images when scanning folders.
pub const IMAGE_EXTENSIONS: &[&str] = &["png", "jpg", "jpeg", "tif", "tiff"];

/// True when `path` has one of [`IMAGE_EXTENSIONS`] (case-insensitive).
pub fn has_image_extension(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .map(|e| IMAGE_EXTENSIONS.contains(&e.to_ascii_lowercase().as_str()))
        .unwrap_or(false)
}

/// Checks that `path` is a regular file (not a folder or a device such as `/dev/zero`, which
/// would be read forever) and returns its length in bytes.
fn check_input_file(path: &Path) -> Result<u64> {
    let meta = std::fs::metadata(path).map_err(|e| GroveError::io(path, e))?;
    if meta.is_dir() {
        return Err(GroveError::input(
            path,
            "is a folder, not an image file (are the arguments in the right order?)",
        ));
    }
    if !meta.is_file() {
        return Err(GroveError::input(
            path,
            "is not a regular file (a device or pipe?); pass an image file",
        ));
    }
    Ok(meta.len())
}

/// Reads an input file's bytes after [`check_input_file`].
pub fn read_input_file(path: &Path) -> Result<Vec<u8>> {
    check_input_file(path)?;
    std::fs::read(path).map_err(|e| GroveError::io(path, e))
}

/// True when `bytes` start like a TIFF or BigTIFF (either byte order).
pub fn is_tiff(bytes: &[u8]) -> bool {
    matches!(
        bytes.get(..4),
        Some(b"II*\0" | b"MM\0*" | b"II+\0" | b"MM\0+")
    )
}

/// A decoder for the image `source` holds (`len` bytes), its format recognised from the
/// content. Generic over the source so a header can be probed from the file without reading
/// all of it.
fn decoder_for<'a, R: std::io::BufRead + std::io::Seek + 'a>(
    path: &Path,
    source: R,
    len: usize,
) -> Result<(image::ImageFormat, impl image::ImageDecoder + 'a)> {
    let mut source = source;
    let tiff = is_tiff(source.fill_buf().map_err(|e| GroveError::io(path, e))?);
    let mut reader = image::ImageReader::new(source);
    // grove's own limit (`image_check::max_pixels`, checked on the header) replaces the
    // decoder's fixed 512 MiB one, whose "Memory limit exceeded" gives no size.
    reader.no_limits();
    // The `image` crate's guess does not know BigTIFF's magic; its TIFF decoder reads it.
    let reader = if tiff {
        reader.set_format(image::ImageFormat::Tiff);
        reader
    } else {
        reader
            .with_guessed_format()
            .map_err(|e| GroveError::io(path, e))?
    };
    let Some(format) = reader.format() else {
        return Err(GroveError::input(
            path,
            if len == 0 {
                "the file is empty (0 bytes)"
            } else {
                "not a PNG, JPEG or TIFF image (its content is not recognised; is the file misnamed or damaged?)"
            },
        ));
    };
    let decoder = reader
        .into_decoder()
        .map_err(|e| GroveError::input(path, describe_decode_error(&e, len)))?;
    Ok((format, decoder))
}

/// Decodes after checking the header against the size limit and, for JPEG, that the file is
/// complete (see `image_check`).
fn decode(path: &Path) -> Result<DynamicImage> {
    use image::ImageDecoder;
    let bytes = read_input_file(path)?;
    let (format, decoder) = decoder_for(path, Cursor::new(&bytes), bytes.len())?;
    let (w, h) = decoder.dimensions();
    check_size(path, w as u64, h as u64)?;
    if format == image::ImageFormat::Jpeg {
        check_jpeg_complete(path, &bytes)?;
    }
    DynamicImage::from_decoder(decoder)
        .map_err(|e| GroveError::input(path, describe_decode_error(&e, bytes.len())))
}

/// What an image file's header says, read without decoding the pixels.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ImageHeader {
    pub width: usize,
    pub height: usize,
    /// One channel (with or without alpha); [`read_image`] gives one plane for these.
    pub grey: bool,
}

/// Reads only the header of an image file (cheap: lets training check sizes and decide the
/// colour mode before any pixel is decoded).
pub fn probe_image(path: &Path) -> Result<ImageHeader> {
    use image::ImageDecoder;
    // Only the header is read: probing a multi-gigabyte image must not load it.
    let len = check_input_file(path)?;
    let file = std::fs::File::open(path).map_err(|e| GroveError::io(path, e))?;
    let (_, decoder) = decoder_for(path, std::io::BufReader::new(file), len as usize)?;
    let (w, h) = decoder.dimensions();
    check_size(path, w as u64, h as u64)?;
    Ok(ImageHeader {
        width: w as usize,
        height: h as usize,
        grey: is_grey_colour(decoder.color_type()),
    })
}

fn is_grey_colour(c: image::ColorType) -> bool {
    use image::ColorType as C;
    matches!(c, C::L8 | C::La8 | C::L16 | C::La16)
}

/// Reads an image file into sRGB planes in [0, 1].
pub fn read_image(path: &Path) -> Result<RasterImage> {
    use image::ColorType as C;
    let img = match decode(path) {
        Ok(img) => img,
        Err(e) => return tiff_second_reading(path).unwrap_or(Err(e)),
    };
    let (w, h) = (img.width() as usize, img.height() as usize);
    if let Some(buf) = img.as_rgb32f() {
        check_finite(path, buf.as_raw(), 3, w)?;
    } else if let Some(buf) = img.as_rgba32f() {
        check_finite(path, buf.as_raw(), 4, w)?;
    }
    let grey = is_grey_colour(img.color());
    let n_ch = if grey { 1 } else { 3 };
    let mut planes = vec![Plane::filled(w, h, 0.0); n_ch];
    let wide = matches!(
        img.color(),
        C::L16 | C::La16 | C::Rgb16 | C::Rgba16 | C::Rgb32F | C::Rgba32F
    );
    if grey && wide {
        let buf = img.into_luma16();
        fill(&mut planes, buf.as_raw(), 1, 1.0 / 65535.0);
    } else if grey {
        let buf = img.into_luma8();
        fill(&mut planes, buf.as_raw(), 1, 1.0 / 255.0);
    } else if wide {
        let buf = img.into_rgb16();
        fill(&mut planes, buf.as_raw(), 3, 1.0 / 65535.0);
    } else {
        let buf = img.into_rgb8();
        fill(&mut planes, buf.as_raw(), 3, 1.0 / 255.0);
    }
    Ok(RasterImage {
        width: w,
        height: h,
        channels: planes,
    })
}

/// A TIFF the `image` crate cannot decode read through grove's own chunk reader, which has
/// a second LZW decoder for chunks the `tiff` crate refuses (`tiff_lzw`); `None` (keep the
/// first error) when that reader does not take the file or fails too.
fn tiff_second_reading(path: &Path) -> Option<Result<RasterImage>> {
    use stream::RowSource;
    let rows = stream::TiffRows::open(path).ok()??;
    let (w, h) = (rows.width(), rows.height());
    check_size(path, w as u64, h as u64).ok()?;
    let mut bands = stream::BandReader::new(Box::new(rows));
    bands.rows(0, h).ok().map(Ok)
}

/// Float images may hold NaN or infinity, which no filter or tree can use.
fn check_finite(path: &Path, raw: &[f32], stride: usize, width: usize) -> Result<()> {
    if let Some(i) = raw.iter().position(|v| !v.is_finite()) {
        let px = i / stride;
        return Err(GroveError::input(
            path,
            format!(
                "float image has a non-finite value ({}) at x={}, y={}; fix or mask it before segmenting",
                raw[i],
                px % width,
                px / width
            ),
        ));
    }
    Ok(())
}

fn fill<T: Copy + Into<f32>>(planes: &mut [Plane], raw: &[T], stride: usize, scale: f32) {
    for (c, plane) in planes.iter_mut().enumerate() {
        for (dst, px) in plane.data.iter_mut().zip(raw.chunks_exact(stride)) {
            *dst = px[c].into() * scale;
        }
    }
}

/// The raw content of a label file before it is mapped through the class table.
pub enum LabelPixels {
    /// One value per pixel (grey or palette-indexed PNG): the value is the class id.
    Values(Vec<u8>),
    /// Colour-coded: RGBA per pixel (alpha 255 for RGB files).
    Colours(Vec<[u8; 4]>),
}

/// A label image as read from disk.
pub struct LabelFile {
    pub width: usize,
    pub height: usize,
    pub pixels: LabelPixels,
}

/// Reads a label file, PNG or TIFF (recognised from its content), without colour expansion:
/// palette images yield their indices.
pub fn read_label_file(path: &Path) -> Result<LabelFile> {
    let bytes = read_input_file(path)?;
    if is_tiff(&bytes) {
        tiff_labels::decode_label_tiff(&bytes).map_err(|m| GroveError::input(path, m))
    } else {
        decode_label_png(&bytes).map_err(|m| GroveError::input(path, m))
    }
}

/// Width and height of a label file (PNG or TIFF) from its header, without decoding.
pub fn probe_label_file(path: &Path) -> Result<(usize, usize)> {
    let head = read_head(path, 4)?;
    if is_tiff(&head) {
        let file = std::fs::File::open(path).map_err(|e| GroveError::io(path, e))?;
        tiff_labels::probe_label_tiff(std::io::BufReader::new(file))
            .map_err(|m| GroveError::input(path, m))
    } else {
        probe_label_png(path)
    }
}

/// The first `n` bytes of a file (fewer when it is shorter).
fn read_head(path: &Path, n: usize) -> Result<Vec<u8>> {
    use std::io::Read;
    let f = std::fs::File::open(path).map_err(|e| GroveError::io(path, e))?;
    let mut head = Vec::with_capacity(n);
    f.take(n as u64)
        .read_to_end(&mut head)
        .map_err(|e| GroveError::io(path, e))?;
    Ok(head)
}

/// Reads a label PNG without colour expansion: a palette-indexed PNG yields its indices
/// (grove writes its own label maps that way, so they can be read back as labels).
pub fn read_label_png(path: &Path) -> Result<LabelFile> {
    let bytes = read_input_file(path)?;
    decode_label_png(&bytes).map_err(|m| GroveError::input(path, m))
}

fn png_error(e: png::DecodingError, len: usize) -> String {
    let text = e.to_string();
    if len == 0 {
        "the file is empty (0 bytes)".into()
    } else if matches!(&e, png::DecodingError::IoError(io) if io.kind() == std::io::ErrorKind::UnexpectedEof)
        || text.to_ascii_lowercase().contains("eof")
    {
        "label PNG is truncated: it ends before all of its pixel data".into()
    } else {
        format!("cannot decode label PNG: {text}")
    }
}

/// Width and height from a label PNG's header, without decoding (so a label that does not
/// match its image is refused before any allocation).
pub fn probe_label_png(path: &Path) -> Result<(usize, usize)> {
    let bytes = read_input_file(path)?;
    let reader = png::Decoder::new(Cursor::new(&bytes))
        .read_info()
        .map_err(|e| GroveError::input(path, png_error(e, bytes.len())))?;
    let info = reader.info();
    Ok((info.width as usize, info.height as usize))
}

/// [`read_label_png`] on the file's bytes; the error is a message without the file name.
pub fn decode_label_png(bytes: &[u8]) -> std::result::Result<LabelFile, String> {
    use png::ColorType as C;
    let bad = |e: png::DecodingError| png_error(e, bytes.len());
    let mut decoder = png::Decoder::new(Cursor::new(bytes));
    decoder.set_transformations(png::Transformations::IDENTITY);
    let mut reader = decoder.read_info().map_err(bad)?;
    {
        let info = reader.info();
        if let Some(problem) = size_problem(info.width as u64, info.height as u64) {
            return Err(problem);
        }
    }
    let size = reader
        .output_buffer_size()
        .ok_or_else(|| "label PNG is too large".to_string())?;
    let mut buf = vec![0u8; size];
    let info = reader.next_frame(&mut buf).map_err(bad)?;
    let (w, h) = (info.width as usize, info.height as usize);
    let depth = info.bit_depth as usize;
    let channels = info.color_type.samples();
    let row_values = |row: &[u8]| -> Vec<u16> {
        let per_row = w * channels;
        match depth {
            16 => row
                .chunks_exact(2)
                .take(per_row)
                .map(|b| u16::from_be_bytes([b[0], b[1]]))
                .collect(),
            8 => row[..per_row].iter().map(|&b| b as u16).collect(),
            d => {
                let mask = (1u16 << d) - 1;
                (0..per_row)
                    .map(|i| {
                        let bit = i * d;
                        let byte = row[bit / 8] as u16;
                        (byte >> (8 - d - bit % 8)) & mask
                    })
                    .collect()
            }
        }
    };
    let mut values: Vec<u16> = Vec::with_capacity(w * h * channels);
    for row in buf.chunks_exact(info.line_size).take(h) {
        values.extend(row_values(row));
    }
    let too_wide = |v: u16| v > 255;
    let pixels = match info.color_type {
        C::Grayscale | C::Indexed => {
            if depth == 16 && values.iter().any(|&v| too_wide(v)) {
                return Err(
                    "16-bit label values above 255 are not supported (class ids are 0..254)".into(),
                );
            }
            LabelPixels::Values(values.into_iter().map(|v| v as u8).collect())
        }
        C::GrayscaleAlpha => LabelPixels::Values(
            values
                .chunks_exact(2)
                .map(|p| if p[1] == 0 { 255 } else { p[0].min(255) as u8 })
                .collect(),
        ),
        C::Rgb | C::Rgba => {
            let to8 = |v: u16| if depth == 16 { (v >> 8) as u8 } else { v as u8 };
            LabelPixels::Colours(
                values
                    .chunks_exact(channels)
                    .map(|p| {
                        let a = if channels == 4 { to8(p[3]) } else { 255 };
                        [to8(p[0]), to8(p[1]), to8(p[2]), a]
                    })
                    .collect(),
            )
        }
    };
    Ok(LabelFile {
        width: w,
        height: h,
        pixels,
    })
}

pub use crate::atomic_write::write_atomic;

/// An 8-bit PNG in memory (fast compression), for files and for the workspace's tiles.
pub fn encode_png(
    width: usize,
    height: usize,
    color: png::ColorType,
    palette: Option<Vec<u8>>,
    data: &[u8],
) -> Vec<u8> {
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, width as u32, height as u32);
        enc.set_color(color);
        enc.set_depth(png::BitDepth::Eight);
        // fdeflate's fast mode: apply writes several PNGs per image, and at the default level
        // their encoding was ~7 % of `apply`; measured on 20 demo scenes:
        // 4.5 → 3.6 s, and the files came out no larger (6.5 → 6.4 MB).
        enc.set_compression(png::Compression::Fast);
        if let Some(p) = palette {
            enc.set_palette(p);
        }
        // Marks the file as grove's own, so a re-run may replace it (see `output_guard`).
        enc.add_text_chunk("Software".into(), crate::output_guard::generator())
            .expect("a Latin-1 keyword and text");
        // Writing into a Vec cannot fail for valid dimensions, which callers guarantee.
        let mut writer = enc.write_header().expect("png header");
        writer.write_image_data(data).expect("png data");
    }
    out
}

/// A palette-indexed label PNG: pixel value = class id, palette entry id = class colour,
/// so the file is both a valid label input for grove and a readable picture.
pub fn write_label_png(
    path: &Path,
    width: usize,
    height: usize,
    ids: &[u8],
    palette: &[[u8; 3]; 256],
) -> Result<()> {
    let pal: Vec<u8> = palette.iter().flatten().copied().collect();
    write_atomic(
        path,
        &encode_png(width, height, png::ColorType::Indexed, Some(pal), ids),
    )
}

/// An 8-bit grey PNG.
pub fn write_grey_png(path: &Path, width: usize, height: usize, data: &[u8]) -> Result<()> {
    write_atomic(
        path,
        &encode_png(width, height, png::ColorType::Grayscale, None, data),
    )
}

/// An 8-bit RGB PNG.
pub fn write_rgb_png(path: &Path, width: usize, height: usize, rgb: &[u8]) -> Result<()> {
    write_atomic(
        path,
        &encode_png(width, height, png::ColorType::Rgb, None, rgb),
    )
}

/// Output path `dir/NAME.ext`, where NAME is `stem` made safe as one path component
/// ([`crate::output_guard::safe_file_name`]): names from data never steer where files go.
pub fn output_path(dir: &Path, stem: &str, ext: &str) -> PathBuf {
    dir.join(format!(
        "{}.{ext}",
        crate::output_guard::safe_file_name(stem)
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn label_png_round_trips_through_palette() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("l.png");
        let mut pal = [[0u8; 3]; 256];
        pal[3] = [10, 20, 30];
        let ids = vec![0, 3, 255, 1, 2, 3];
        write_label_png(&path, 3, 2, &ids, &pal).unwrap();
        let back = read_label_png(&path).unwrap();
        match back.pixels {
            LabelPixels::Values(v) => assert_eq!(v, ids),
            LabelPixels::Colours(_) => panic!("palette PNG must read back as indices"),
        }
    }

    #[test]
    fn packed_low_bit_depth_labels_are_unpacked() {
        // 2-bit grey, 5 pixels wide: values 0,1,2,3,1 packed MSB first (PNG spec, section 7.2).
        let mut bytes = Vec::new();
        {
            let mut enc = png::Encoder::new(&mut bytes, 5, 1);
            enc.set_color(png::ColorType::Grayscale);
            enc.set_depth(png::BitDepth::Two);
            let mut w = enc.write_header().unwrap();
            w.write_image_data(&[0b0001_1011, 0b0100_0000]).unwrap();
        }
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("l2.png");
        std::fs::write(&path, bytes).unwrap();
        match read_label_png(&path).unwrap().pixels {
            LabelPixels::Values(v) => assert_eq!(v, vec![0, 1, 2, 3, 1]),
            LabelPixels::Colours(_) => panic!("grey PNG must read as values"),
        }
    }

    #[test]
    fn sixteen_bit_grey_is_scaled_to_unit_range() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("g16.png");
        let img =
            image::ImageBuffer::<image::Luma<u16>, _>::from_raw(2, 1, vec![0u16, 65535]).unwrap();
        img.save(&path).unwrap();
        let r = read_image(&path).unwrap();
        assert!(r.is_grey());
        assert_eq!(r.channels[0].data, vec![0.0, 1.0]);
    }

    #[test]
    fn tiff_and_jpeg_inputs_are_read() {
        let dir = tempfile::tempdir().unwrap();
        let tif = dir.path().join("rgb16.tif");
        let raw: Vec<u16> = vec![65535, 0, 32768, 0, 65535, 0];
        image::ImageBuffer::<image::Rgb<u16>, _>::from_raw(2, 1, raw)
            .unwrap()
            .save(&tif)
            .unwrap();
        let r = read_image(&tif).unwrap();
        assert_eq!((r.width, r.height, r.channels.len()), (2, 1, 3));
        assert_eq!(r.channels[0].data, vec![1.0, 0.0]);
        assert!((r.channels[2].data[0] - 32768.0 / 65535.0).abs() < 1e-6);
        let jpg = dir.path().join("grey.jpg");
        image::GrayImage::from_pixel(8, 8, image::Luma([128]))
            .save(&jpg)
            .unwrap();
        let g = read_image(&jpg).unwrap();
        assert!(g.is_grey());
        assert!(
            (g.channels[0].data[0] - 128.0 / 255.0).abs() < 2.0 / 255.0,
            "JPEG is lossy"
        );
    }

    #[test]
    fn corrupt_image_names_the_file() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("broken.png");
        std::fs::write(&path, b"\x89PNG\r\n\x1a\nnot really").unwrap();
        let err = read_image(&path).unwrap_err().to_string();
        assert!(err.contains("broken.png"), "{err}");
    }
}

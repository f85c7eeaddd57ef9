//! Reading an image a few rows at a time, so an image larger than memory can be segmented
//! band by band (see `tiling`).
//!
//! * PNG streams by rows (the `png` crate's row reader);
//! * TIFF streams by strips or by rows of tiles (the `tiff` crate's chunk reader; BigTIFF too),
//!   for chunky (interleaved) 8- or 16-bit grey, grey+alpha, RGB and RGBA;
//! * everything else (JPEG, planar or unusual TIFF) cannot be read in pieces: it is decoded
//!   whole, and refused above [`MAX_WHOLE_DECODE_PIXELS`] with a message saying what to do.
//!
//! Rows come out exactly as [`super::read_image`] would give them (same channel mapping, same
//! scaling of 8- and 16-bit samples), which `tests` below check pixel for pixel.

use std::fs::File;
use std::io::BufReader;
use std::path::{Path, PathBuf};

use super::tiff_lzw::LzwChunks;
use super::RasterImage;
use crate::error::{GroveError, Result};
use crate::image_check::describe_stream_error;
use crate::plane::Plane;

/// Largest image decoded whole when its format cannot be streamed (JPEG, planar TIFF):
/// 100 megapixels is ~300 MB of 8-bit RGB plus the decoder's own buffers.
pub const MAX_WHOLE_DECODE_PIXELS: usize = 100_000_000;

/// A source of image rows, top to bottom.
pub trait RowSource: Send {
    fn width(&self) -> usize;
    fn height(&self) -> usize;
    /// One plane (grey) or three (R, G, B), as [`super::read_image`].
    fn channels(&self) -> usize;
    /// Appends the next `n` rows, as sRGB values in [0, 1], to `out` (one row-major vector per
    /// channel).
    fn read_rows(&mut self, n: usize, out: &mut [Vec<f32>]) -> Result<()>;
}

/// Opens `path` for reading by rows: PNG and TIFF stream; other formats are decoded whole
/// (up to [`MAX_WHOLE_DECODE_PIXELS`]).
pub fn open_rows(path: &Path) -> Result<Box<dyn RowSource>> {
    if let Some(rows) = open_streamable(path)? {
        return Ok(rows);
    }
    let ext = path
        .extension()
        .and_then(|e| e.to_str())
        .unwrap_or("")
        .to_ascii_lowercase();
    let why = match ext.as_str() {
        "jpg" | "jpeg" => "JPEG cannot be read in pieces",
        _ => "this image's layout cannot be read in pieces",
    };
    Ok(Box::new(WholeRows::open(path, why)?))
}

/// Opens `path` for reading by rows if it can be read in pieces (PNG, and TIFF in the
/// layouts [`TiffRows`] handles); `Ok(None)` for every other file. Only the header is read.
pub fn open_streamable(path: &Path) -> Result<Option<Box<dyn RowSource>>> {
    let mut magic = [0u8; 4];
    {
        use std::io::Read;
        let mut f = File::open(path).map_err(|e| GroveError::io(path, e))?;
        let _ = f.read(&mut magic).map_err(|e| GroveError::io(path, e))?;
    }
    if magic == [0x89, b'P', b'N', b'G'] {
        return Ok(Some(Box::new(PngRows::open(path)?)));
    }
    if &magic[..2] == b"II" || &magic[..2] == b"MM" {
        if let Some(t) = TiffRows::open(path)? {
            return Ok(Some(Box::new(t)));
        }
    }
    Ok(None)
}

fn scale_into(samples: impl Iterator<Item = f32>, stride: usize, out: &mut [Vec<f32>]) {
    // `read_image` maps channels the same way: grey(+alpha) → plane 0, RGB(A) → planes 0–2.
    for (i, v) in samples.enumerate() {
        let c = i % stride;
        if c < out.len() {
            out[c].push(v);
        }
    }
}

/// PNG by rows. Palette and low-bit-depth images are expanded as the `image` crate does.
pub struct PngRows {
    path: PathBuf,
    reader: png::Reader<BufReader<File>>,
    width: usize,
    height: usize,
    /// Samples per pixel in the decoded rows, and whether they are 16-bit.
    stride: usize,
    wide: bool,
    channels: usize,
}

impl PngRows {
    pub fn open(path: &Path) -> Result<PngRows> {
        let bad = |e: png::DecodingError| {
            GroveError::input(path, describe_stream_error("PNG", &e.to_string()))
        };
        let file = File::open(path).map_err(|e| GroveError::io(path, e))?;
        let mut decoder = png::Decoder::new(BufReader::new(file));
        decoder.set_transformations(png::Transformations::EXPAND);
        let reader = decoder.read_info().map_err(bad)?;
        let (color, depth) = reader.output_color_type();
        let info = reader.info();
        let (width, height) = (info.width as usize, info.height as usize);
        if width == 0 || height == 0 {
            return Err(GroveError::input(path, "image has no pixels"));
        }
        let stride = color.samples();
        let channels = if stride <= 2 { 1 } else { 3 };
        Ok(PngRows {
            path: path.to_path_buf(),
            reader,
            width,
            height,
            stride,
            wide: depth == png::BitDepth::Sixteen,
            channels,
        })
    }
}

impl RowSource for PngRows {
    fn width(&self) -> usize {
        self.width
    }
    fn height(&self) -> usize {
        self.height
    }
    fn channels(&self) -> usize {
        self.channels
    }
    fn read_rows(&mut self, n: usize, out: &mut [Vec<f32>]) -> Result<()> {
        for _ in 0..n {
            let row = self
                .reader
                .next_row()
                .map_err(|e| {
                    GroveError::input(&self.path, describe_stream_error("PNG", &e.to_string()))
                })?
                .ok_or_else(|| GroveError::input(&self.path, "PNG ends before its last row"))?;
            let data = row.data();
            let len = self.width * self.stride;
            if self.wide {
                let s = data[..2 * len]
                    .chunks_exact(2)
                    .map(|b| u16::from_be_bytes([b[0], b[1]]) as f32 * (1.0 / 65535.0));
                scale_into(s, self.stride, out);
            } else {
                let s = data[..len].iter().map(|&b| b as f32 * (1.0 / 255.0));
                scale_into(s, self.stride, out);
            }
        }
        Ok(())
    }
}

/// TIFF by strips or rows of tiles: one chunk row (full width) is decoded at a time.
pub struct TiffRows {
    path: PathBuf,
    decoder: tiff::decoder::Decoder<BufReader<File>>,
    width: usize,
    height: usize,
    stride: usize,
    channels: usize,
    wide: bool,
    /// Chunk size (strip: width × rows per strip) and chunks per row of chunks.
    chunk: (usize, usize),
    across: usize,
    /// Decoded samples of the current chunk row (`rows × width × stride`), and where in it
    /// the next row starts.
    rows: Vec<u16>,
    next: usize,
    chunk_row: usize,
    /// LZW chunks the `tiff` crate refuses are decoded a second way (see `tiff_lzw`).
    lzw: Option<LzwChunks>,
}

impl TiffRows {
    /// `Ok(None)` when the file is a TIFF this reader does not stream (planar, float,
    /// palette, CMYK ...): the caller falls back to decoding it whole.
    pub fn open(path: &Path) -> Result<Option<TiffRows>> {
        use tiff::decoder::{ChunkType, Decoder};
        use tiff::tags::Tag;
        use tiff::ColorType as T;
        let bad = |e: tiff::TiffError| {
            GroveError::input(path, describe_stream_error("TIFF", &e.to_string()))
        };
        let file = File::open(path).map_err(|e| GroveError::io(path, e))?;
        let mut decoder = Decoder::new(BufReader::new(file)).map_err(bad)?;
        let (w, h) = decoder.dimensions().map_err(bad)?;
        let (width, height) = (w as usize, h as usize);
        if width == 0 || height == 0 {
            return Err(GroveError::input(path, "image has no pixels"));
        }
        let planar = decoder
            .find_tag_unsigned::<u16>(Tag::PlanarConfiguration)
            .map_err(bad)?
            .unwrap_or(1);
        // One value per sample; all must be unsigned integers (1).
        let sample_format = decoder
            .find_tag_unsigned_vec::<u16>(Tag::SampleFormat)
            .map_err(bad)?
            .map_or(1, |v| if v.iter().all(|&f| f == 1) { 1 } else { 0 });
        let photometric = decoder
            .find_tag_unsigned::<u16>(Tag::PhotometricInterpretation)
            .map_err(bad)?;
        let (stride, channels, bits) = match decoder.colortype().map_err(bad)? {
            T::Gray(b) => (1, 1, b),
            T::GrayA(b) => (2, 1, b),
            T::RGB(b) => (3, 3, b),
            T::RGBA(b) => (4, 3, b),
            _ => return Ok(None),
        };
        // WhiteIsZero grey (photometric 0) and anything but unsigned integers are left to the
        // whole-image decoder, which knows their conventions.
        if planar != 1 || sample_format != 1 || photometric == Some(0) || !matches!(bits, 8 | 16) {
            return Ok(None);
        }
        let (cw, ch) = decoder.chunk_dimensions();
        let (cw, ch) = (cw as usize, ch as usize);
        let across = match decoder.get_chunk_type() {
            ChunkType::Strip => 1,
            ChunkType::Tile => width.div_ceil(cw.max(1)),
        };
        let lzw = LzwChunks::of(&mut decoder, cw.max(1), stride, bits == 16);
        Ok(Some(TiffRows {
            path: path.to_path_buf(),
            decoder,
            width,
            height,
            stride,
            channels,
            wide: bits == 16,
            chunk: (cw.max(1), ch.max(1)),
            across,
            rows: Vec::new(),
            next: 0,
            chunk_row: 0,
            lzw,
        }))
    }

    /// Decodes the next row of chunks into `self.rows`.
    fn fill(&mut self) -> Result<()> {
        use tiff::decoder::DecodingResult as D;
        let path = &self.path;
        let bad = |e: tiff::TiffError| {
            GroveError::input(path, describe_stream_error("TIFF", &e.to_string()))
        };
        let y0 = self.chunk_row * self.chunk.1;
        if y0 >= self.height {
            return Err(GroveError::input(path, "TIFF ends before its last row"));
        }
        let rows = self.chunk.1.min(self.height - y0);
        let row_len = self.width * self.stride;
        self.rows.clear();
        self.rows.resize(rows * row_len, 0);
        for cx in 0..self.across {
            let index = (self.chunk_row * self.across + cx) as u32;
            let (dw, dh) = self.decoder.chunk_data_dimensions(index);
            let (dw, dh) = (dw as usize, (dh as usize).min(rows));
            let data: Vec<u16> = match self.decoder.read_chunk(index) {
                Ok(D::U8(v)) => v.into_iter().map(u16::from).collect(),
                Ok(D::U16(v)) => v,
                Ok(_) => return Err(GroveError::input(path, "unexpected TIFF sample type")),
                Err(e) => self
                    .lzw
                    .as_ref()
                    .and_then(|l| l.decode_chunk(path, index as usize, dh, dw))
                    .ok_or_else(|| bad(e))?,
            };
            let x0 = cx * self.chunk.0;
            let len = dw * self.stride;
            for y in 0..dh {
                let src = data.get(y * len..(y + 1) * len).ok_or_else(|| {
                    GroveError::input(path, "TIFF chunk is shorter than its size")
                })?;
                let at = y * row_len + x0 * self.stride;
                self.rows[at..at + len].copy_from_slice(src);
            }
        }
        self.chunk_row += 1;
        self.next = 0;
        Ok(())
    }
}

impl RowSource for TiffRows {
    fn width(&self) -> usize {
        self.width
    }
    fn height(&self) -> usize {
        self.height
    }
    fn channels(&self) -> usize {
        self.channels
    }
    fn read_rows(&mut self, n: usize, out: &mut [Vec<f32>]) -> Result<()> {
        let row_len = self.width * self.stride;
        let scale = if self.wide {
            1.0 / 65535.0
        } else {
            1.0 / 255.0
        };
        for _ in 0..n {
            if self.next * row_len >= self.rows.len() {
                self.fill()?;
            }
            let row = &self.rows[self.next * row_len..(self.next + 1) * row_len];
            scale_into(row.iter().map(|&v| v as f32 * scale), self.stride, out);
            self.next += 1;
        }
        Ok(())
    }
}

/// A format that cannot be streamed: decoded whole (bounded by [`MAX_WHOLE_DECODE_PIXELS`]),
/// then handed out by rows.
pub struct WholeRows {
    image: RasterImage,
    next: usize,
}

impl WholeRows {
    pub fn open(path: &Path, why: &str) -> Result<WholeRows> {
        let header = super::probe_image(path)?;
        let pixels = header.width.saturating_mul(header.height);
        if pixels > MAX_WHOLE_DECODE_PIXELS {
            return Err(GroveError::input(
                path,
                format!(
                    "{} × {} pixels: {why}, and images above {} megapixels in this format are refused; convert it to TIFF or PNG (both are read in pieces)",
                    header.width,
                    header.height,
                    MAX_WHOLE_DECODE_PIXELS / 1_000_000
                ),
            ));
        }
        Ok(WholeRows {
            image: super::read_image(path)?,
            next: 0,
        })
    }
}

impl RowSource for WholeRows {
    fn width(&self) -> usize {
        self.image.width
    }
    fn height(&self) -> usize {
        self.image.height
    }
    fn channels(&self) -> usize {
        self.image.channels.len()
    }
    fn read_rows(&mut self, n: usize, out: &mut [Vec<f32>]) -> Result<()> {
        let w = self.image.width;
        for (plane, o) in self.image.channels.iter().zip(out.iter_mut()) {
            o.extend_from_slice(&plane.data[self.next * w..(self.next + n) * w]);
        }
        self.next += n;
        Ok(())
    }
}

/// Delivers consecutive, overlapping row windows of a [`RowSource`] (the bands of a tile
/// grid), reading each row once and keeping only the rows still needed.
pub struct BandReader {
    source: Box<dyn RowSource>,
    /// Rows `first..first + held` of the image, per channel.
    held: Vec<Vec<f32>>,
    first: usize,
    read: usize,
}

impl BandReader {
    pub fn new(source: Box<dyn RowSource>) -> BandReader {
        let held = vec![Vec::new(); source.channels()];
        BandReader {
            source,
            held,
            first: 0,
            read: 0,
        }
    }

    pub fn width(&self) -> usize {
        self.source.width()
    }
    pub fn height(&self) -> usize {
        self.source.height()
    }
    pub fn channels(&self) -> usize {
        self.source.channels()
    }

    /// Rows `y0..y0 + rows` as an image; `y0` must not move backwards between calls.
    pub fn rows(&mut self, y0: usize, rows: usize) -> Result<RasterImage> {
        let w = self.source.width();
        assert!(y0 >= self.first, "bands are read top to bottom");
        assert!(y0 + rows <= self.source.height(), "band inside the image");
        // Drop rows above the band.
        let drop = (y0 - self.first).min(self.read - self.first);
        for ch in &mut self.held {
            ch.drain(..drop * w);
        }
        self.first += drop;
        if self.read < y0 {
            // Rows skipped entirely (not the case for tile bands): read and discard.
            let skip = y0 - self.read;
            let mut scratch = vec![Vec::new(); self.held.len()];
            self.source.read_rows(skip, &mut scratch)?;
            self.read = y0;
            self.first = y0;
        }
        if y0 + rows > self.read {
            let more = y0 + rows - self.read;
            self.source.read_rows(more, &mut self.held)?;
            self.read += more;
        }
        let channels = self
            .held
            .iter()
            .map(|ch| Plane::from_vec(w, rows, ch[..rows * w].to_vec()))
            .collect();
        Ok(RasterImage {
            width: w,
            height: rows,
            channels,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn read_all(path: &Path, chunk: usize) -> RasterImage {
        let mut src = open_rows(path).unwrap();
        let (w, h) = (src.width(), src.height());
        let mut out = vec![Vec::new(); src.channels()];
        let mut y = 0;
        while y < h {
            let n = chunk.min(h - y);
            src.read_rows(n, &mut out).unwrap();
            y += n;
        }
        RasterImage {
            width: w,
            height: h,
            channels: out.into_iter().map(|d| Plane::from_vec(w, h, d)).collect(),
        }
    }

    fn assert_same(a: &RasterImage, b: &RasterImage) {
        assert_eq!(
            (a.width, a.height, a.channels.len()),
            (b.width, b.height, b.channels.len())
        );
        for (p, q) in a.channels.iter().zip(&b.channels) {
            assert!(p
                .data
                .iter()
                .zip(&q.data)
                .all(|(x, y)| x.to_bits() == y.to_bits()));
        }
    }

    fn pattern(n: usize, k: u32) -> impl Iterator<Item = u32> {
        (0..n as u32).map(move |i| i.wrapping_mul(2_654_435_761).rotate_left(k))
    }

    /// Streamed rows equal `read_image` (the `image` crate) for PNG and TIFF, 8/16-bit,
    /// grey, grey+alpha, RGB, RGBA and palette.
    #[test]
    fn streamed_rows_equal_whole_decoding() {
        use image::{ImageBuffer, Luma, LumaA, Rgb, Rgba};
        let dir = tempfile::tempdir().unwrap();
        let (w, h) = (37u32, 23u32);
        let n = (w * h) as usize;
        let g8: Vec<u8> = pattern(n, 3).map(|v| v as u8).collect();
        let g16: Vec<u16> = pattern(n, 5).map(|v| v as u16).collect();
        let rgb8: Vec<u8> = pattern(3 * n, 7).map(|v| v as u8).collect();
        let rgb16: Vec<u16> = pattern(3 * n, 9).map(|v| v as u16).collect();
        let la8: Vec<u8> = pattern(2 * n, 11).map(|v| v as u8).collect();
        let rgba16: Vec<u16> = pattern(4 * n, 13).map(|v| v as u16).collect();
        let mut files = Vec::new();
        for ext in ["png", "tif"] {
            let p = |name: &str| dir.path().join(format!("{name}.{ext}"));
            ImageBuffer::<Luma<u8>, _>::from_raw(w, h, g8.clone())
                .unwrap()
                .save(p("g8"))
                .unwrap();
            ImageBuffer::<Luma<u16>, _>::from_raw(w, h, g16.clone())
                .unwrap()
                .save(p("g16"))
                .unwrap();
            ImageBuffer::<Rgb<u8>, _>::from_raw(w, h, rgb8.clone())
                .unwrap()
                .save(p("rgb8"))
                .unwrap();
            ImageBuffer::<Rgb<u16>, _>::from_raw(w, h, rgb16.clone())
                .unwrap()
                .save(p("rgb16"))
                .unwrap();
            ImageBuffer::<Rgba<u16>, _>::from_raw(w, h, rgba16.clone())
                .unwrap()
                .save(p("rgba16"))
                .unwrap();
            if ext == "png" {
                ImageBuffer::<LumaA<u8>, _>::from_raw(w, h, la8.clone())
                    .unwrap()
                    .save(p("la8"))
                    .unwrap();
            }
            files.extend(["g8", "g16", "rgb8", "rgb16", "rgba16"].map(p));
        }
        files.push(dir.path().join("la8.png"));
        // Several strips of 4 rows (the last one short), 16-bit RGB, written with the tiff crate.
        let strips = dir.path().join("strips.tif");
        {
            use tiff::encoder::{colortype::RGB16, TiffEncoder};
            let f = std::fs::File::create(&strips).unwrap();
            let mut enc = TiffEncoder::new(f).unwrap();
            let mut img = enc.new_image::<RGB16>(w, h).unwrap();
            img.rows_per_strip(4).unwrap();
            let row = 3 * w as usize;
            for chunk in rgb16.chunks(4 * row) {
                img.write_strip(chunk).unwrap();
            }
            img.finish().unwrap();
        }
        files.push(strips);
        // A palette PNG (expanded to RGB by both readers).
        let pal_path = dir.path().join("pal.png");
        let mut pal = [[0u8; 3]; 256];
        for (i, c) in pal.iter_mut().enumerate() {
            *c = [i as u8, (i * 7) as u8, (255 - i) as u8];
        }
        crate::imageio::write_label_png(&pal_path, w as usize, h as usize, &g8, &pal).unwrap();
        files.push(pal_path);
        for f in &files {
            let whole = crate::imageio::read_image(f).unwrap();
            for chunk in [1, 5, 23] {
                assert_same(&read_all(f, chunk), &whole);
            }
        }
    }

    #[test]
    fn bands_overlap_and_match_the_image() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("g.png");
        let (w, h) = (11usize, 40usize);
        let g: Vec<u8> = (0..w * h).map(|i| (i % 251) as u8).collect();
        image::GrayImage::from_raw(w as u32, h as u32, g)
            .unwrap()
            .save(&path)
            .unwrap();
        let whole = crate::imageio::read_image(&path).unwrap();
        let mut bands = BandReader::new(open_rows(&path).unwrap());
        for (y0, rows) in [(0, 15), (5, 20), (18, 22)] {
            let b = bands.rows(y0, rows).unwrap();
            let want = whole.crop(&crate::features::stack::Rect {
                x: 0,
                y: y0,
                width: w,
                height: rows,
            });
            assert_same(&b, &want);
        }
    }

    #[test]
    fn jpeg_is_decoded_whole() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("g.jpg");
        image::GrayImage::from_pixel(9, 7, image::Luma([90]))
            .save(&path)
            .unwrap();
        let whole = crate::imageio::read_image(&path).unwrap();
        assert_same(&read_all(&path, 3), &whole);
    }
}

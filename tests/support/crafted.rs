//! Crafted image files for the bad-input tests (shared by tests/bad_inputs.rs and
//! tests/bad_input_table.rs).

/// A PNG header declaring `w` × `h` with one tiny IDAT: a few hundred bytes on disk.
pub fn png_declaring(w: u32, h: u32, colour: u8) -> Vec<u8> {
    fn chunk(out: &mut Vec<u8>, kind: &[u8], data: &[u8]) {
        out.extend((data.len() as u32).to_be_bytes());
        let start = out.len();
        out.extend(kind);
        out.extend(data);
        let crc = crc32(&out[start..]);
        out.extend(crc.to_be_bytes());
    }
    // CRC-32 (ISO 3309, as the PNG specification requires), bitwise.
    fn crc32(bytes: &[u8]) -> u32 {
        let mut c = 0xffff_ffffu32;
        for &b in bytes {
            c ^= b as u32;
            for _ in 0..8 {
                c = if c & 1 != 0 {
                    0xedb8_8320 ^ (c >> 1)
                } else {
                    c >> 1
                };
            }
        }
        !c
    }
    let mut out = b"\x89PNG\r\n\x1a\n".to_vec();
    let mut ihdr = Vec::new();
    ihdr.extend(w.to_be_bytes());
    ihdr.extend(h.to_be_bytes());
    ihdr.extend([8, colour, 0, 0, 0]);
    chunk(&mut out, b"IHDR", &ihdr);
    // A zlib stream of a few zero bytes (one stored block).
    chunk(
        &mut out,
        b"IDAT",
        &[
            0x78, 0x01, 0x01, 0x04, 0x00, 0xfb, 0xff, 0, 0, 0, 0, 0, 0x04, 0x00, 0x01,
        ],
    );
    chunk(&mut out, b"IEND", &[]);
    out
}

/// A 4 × 4 uncompressed little-endian grey TIFF of 32-bit floats (TIFF 6.0 fields;
/// SampleFormat 3 = IEEE float).
pub fn float_tiff(values: &[f32; 16]) -> Vec<u8> {
    let data: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    let entries: [(u16, u16, u32); 10] = [
        (256, 3, 4),                   // ImageWidth
        (257, 3, 4),                   // ImageLength
        (258, 3, 32),                  // BitsPerSample
        (259, 3, 1),                   // Compression: none
        (262, 3, 1),                   // Photometric: black is zero
        (273, 4, 8 + 2 + 10 * 12 + 4), // StripOffsets: right after the IFD
        (277, 3, 1),                   // SamplesPerPixel
        (278, 3, 4),                   // RowsPerStrip
        (279, 4, 64),                  // StripByteCounts
        (339, 3, 3),                   // SampleFormat: float
    ];
    let mut out = b"II*\0".to_vec();
    out.extend(8u32.to_le_bytes());
    out.extend((entries.len() as u16).to_le_bytes());
    for (tag, kind, value) in entries {
        out.extend(tag.to_le_bytes());
        out.extend(kind.to_le_bytes());
        out.extend(1u32.to_le_bytes());
        if kind == 3 {
            out.extend((value as u16).to_le_bytes());
            out.extend([0, 0]);
        } else {
            out.extend(value.to_le_bytes());
        }
    }
    out.extend(0u32.to_le_bytes());
    out.extend(data);
    out
}

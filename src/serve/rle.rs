//! Run-length coding of label maps between page and server: runs of `(value: u8, length:
//! u32 little-endian)`, row-major. Scribbles are long runs of "unlabelled", so a 12-megapixel
//! map with a few strokes travels in a few kilobytes, and the page codes it in plain JS
//! without a compression library.

/// Codes `values` as runs.
pub fn encode(values: &[u8]) -> Vec<u8> {
    let mut out = Vec::new();
    let mut i = 0;
    while i < values.len() {
        let v = values[i];
        let mut j = i + 1;
        while j < values.len() && values[j] == v && j - i < u32::MAX as usize {
            j += 1;
        }
        out.push(v);
        out.extend_from_slice(&((j - i) as u32).to_le_bytes());
        i = j;
    }
    out
}

/// Decodes runs into exactly `n` values; anything else is an error message.
pub fn decode(bytes: &[u8], n: usize) -> Result<Vec<u8>, String> {
    if !bytes.len().is_multiple_of(5) {
        return Err("label data is not a whole number of runs".into());
    }
    let mut out = Vec::with_capacity(n);
    for run in bytes.chunks_exact(5) {
        let len = u32::from_le_bytes([run[1], run[2], run[3], run[4]]) as usize;
        if len > n - out.len() {
            return Err(format!(
                "label data covers more than the image's {n} pixels"
            ));
        }
        out.resize(out.len() + len, run[0]);
    }
    if out.len() != n {
        return Err(format!(
            "label data covers {} pixels; the image has {n}",
            out.len()
        ));
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_errors() {
        let v = vec![255, 255, 255, 0, 0, 1, 255];
        let e = encode(&v);
        assert_eq!(e.len(), 4 * 5);
        assert_eq!(decode(&e, 7).unwrap(), v);
        assert!(decode(&e, 6).is_err());
        assert!(decode(&e, 8).is_err());
        assert!(decode(&e[..7], 7).is_err());
        assert_eq!(decode(&[], 0).unwrap(), Vec::<u8>::new());
    }
}

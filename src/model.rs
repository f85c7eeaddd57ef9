//! The model file: one self-checking file holding a `Segmenter`.
//!
//! Layout (little-endian): 8-byte magic `GROVE\x00MD`, u32 format version, u64 payload
//! length, payload (bincode 2 of the `Segmenter`), u64 FNV-1a hash of the payload. The
//! magic identifies the file type, the version lets older grove releases refuse newer
//! files with a clear message, and length + hash catch truncation and corruption before
//! bincode sees the bytes.

use std::path::Path;

use crate::error::{GroveError, Result};
use crate::imageio::write_atomic;
use crate::segmenter::Segmenter;

pub const MAGIC: &[u8; 8] = b"GROVE\x00MD";
/// Bump when the serialised layout of `Segmenter` changes. Version 2 added the smoothing
/// default (`Segmenter::smoothing`) and the training profile (`Segmenter::profile`, for
/// `eval::drift`); version 1 files still load, with no smoothing and no profile.
pub const FORMAT_VERSION: u32 = 2;
const HEADER: usize = 8 + 4 + 8;
/// Far above any real model (a 32-tree forest on 200k samples is tens of megabytes).
const MAX_DECODED_BYTES: usize = 1 << 32;
/// What a payload below [`SMALL_PAYLOAD`] bytes may claim to decode to: a real model's
/// memory is a few times its encoded size (varints), so 64 MiB is ample for a payload under
/// 1 MiB, and a crafted tiny file (checksum and all) cannot make the loader allocate
/// gigabytes before it fails.
const SMALL_DECODED_BYTES: usize = 64 << 20;
const SMALL_PAYLOAD: usize = 1 << 20;

/// FNV-1a, 64-bit (Fowler–Noll–Vo): a fast hash that is plenty to detect damage.
fn fnv1a(bytes: &[u8]) -> u64 {
    let mut h: u64 = 0xcbf29ce484222325;
    for &b in bytes {
        h ^= b as u64;
        h = h.wrapping_mul(0x100000001b3);
    }
    h
}

/// Serialises a segmenter to the file format.
pub fn to_bytes(model: &Segmenter) -> Vec<u8> {
    let payload = bincode::serde::encode_to_vec(model, bincode::config::standard())
        .expect("a segmenter always serialises");
    frame(&payload)
}

/// The file around a payload: magic, version, length, payload, hash. Public so the model
/// fuzz target can reach the decoder past the hash with arbitrary payloads.
pub fn frame(payload: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(HEADER + payload.len() + 8);
    out.extend_from_slice(MAGIC);
    out.extend_from_slice(&FORMAT_VERSION.to_le_bytes());
    out.extend_from_slice(&(payload.len() as u64).to_le_bytes());
    out.extend_from_slice(payload);
    out.extend_from_slice(&fnv1a(payload).to_le_bytes());
    out
}

/// Parses the file format; the error message does not include the path.
pub fn from_bytes(bytes: &[u8]) -> std::result::Result<Segmenter, String> {
    if bytes.len() < 8 || &bytes[..8] != MAGIC {
        return Err(
            "not a grove model file (wrong magic bytes); pass a file written by `grove train`"
                .into(),
        );
    }
    if bytes.len() < HEADER {
        return Err("model file is truncated (incomplete header)".into());
    }
    let version = u32::from_le_bytes(bytes[8..12].try_into().expect("4 bytes"));
    if version > FORMAT_VERSION {
        return Err(format!(
            "model format version {version} is newer than this grove ({}) reads (up to {FORMAT_VERSION}); upgrade grove",
            env!("CARGO_PKG_VERSION")
        ));
    }
    if version == 0 {
        return Err("model format version 0 is not valid; the file is damaged".into());
    }
    let len = u64::from_le_bytes(bytes[12..20].try_into().expect("8 bytes")) as usize;
    let Some(end) = HEADER
        .checked_add(len)
        .filter(|e| e.checked_add(8).is_some_and(|t| t <= bytes.len()))
    else {
        return Err(format!(
            "model file is truncated ({} bytes, header announces a {len}-byte payload)",
            bytes.len()
        ));
    };
    if end + 8 != bytes.len() {
        return Err(format!(
            "model file has {} unexpected bytes after its end (damaged, or two files joined); use the file as `grove train` wrote it",
            bytes.len() - end - 8
        ));
    }
    let payload = &bytes[HEADER..end];
    let stored = u64::from_le_bytes(bytes[end..end + 8].try_into().expect("8 bytes"));
    if stored != fnv1a(payload) {
        return Err("model file is damaged (checksum mismatch)".into());
    }
    // The limit caps what length prefixes inside the payload may claim, so a crafted file
    // cannot make the decoder try to allocate more than a model could ever need.
    let unreadable = |e: bincode::error::DecodeError| format!("model payload cannot be read: {e}");
    fn decode<T: serde::de::DeserializeOwned>(
        payload: &[u8],
    ) -> std::result::Result<(T, usize), bincode::error::DecodeError> {
        let standard = bincode::config::standard();
        if payload.len() < SMALL_PAYLOAD {
            bincode::serde::decode_from_slice(payload, standard.with_limit::<SMALL_DECODED_BYTES>())
        } else {
            bincode::serde::decode_from_slice(payload, standard.with_limit::<MAX_DECODED_BYTES>())
        }
    }
    let (model, used): (Segmenter, usize) = if version == 1 {
        let (v1, used): (SegmenterV1, usize) = decode(payload).map_err(unreadable)?;
        (v1.into(), used)
    } else {
        decode(payload).map_err(unreadable)?
    };
    if used != payload.len() {
        return Err("model payload has trailing bytes; the file is damaged".into());
    }
    model
        .check()
        .map_err(|e| format!("model is inconsistent ({e}); retrain it with this grove"))?;
    Ok(model)
}

/// The payload of format version 1: a `Segmenter` without its smoothing default (bincode
/// is not self-describing, so the old layout needs its own type).
#[derive(serde::Deserialize)]
struct SegmenterV1 {
    classes: crate::dataset::ClassTable,
    features: crate::features::stack::FeatureExtractor,
    forest: crate::forest::RandomForest,
    provenance: crate::segmenter::Provenance,
}

impl From<SegmenterV1> for Segmenter {
    /// Version 1 models were made before grove smoothed, so they keep their unsmoothed maps.
    fn from(v1: SegmenterV1) -> Self {
        Segmenter {
            classes: v1.classes,
            features: v1.features,
            forest: v1.forest,
            provenance: v1.provenance,
            smoothing: crate::prediction::SmoothDefault::NONE,
            profile: None,
        }
    }
}

/// Writes a model atomically.
pub fn save(model: &Segmenter, path: &Path) -> Result<()> {
    write_atomic(path, &to_bytes(model))
}

/// Reads a file that should be a model, checking what it is before reading it all: a folder,
/// a device (`/dev/zero`) or a file larger than any model is refused without reading it.
fn read_bounded(path: &Path) -> std::result::Result<Vec<u8>, String> {
    use std::io::Read;
    let meta = std::fs::metadata(path).map_err(|e| crate::error::describe_io(&e))?;
    if meta.is_dir() {
        return Err("is a folder, not a model file (are the arguments in the right order?)".into());
    }
    if !meta.is_file() {
        return Err(
            "is not a regular file (a device or pipe?); pass a model file written by `grove train`"
                .into(),
        );
    }
    let limit = MAX_DECODED_BYTES as u64 + HEADER as u64 + 8;
    if meta.len() > limit {
        return Err(format!(
            "is {} bytes, more than any grove model ({limit} at most); pass a model file written by `grove train`",
            meta.len()
        ));
    }
    let file = std::fs::File::open(path).map_err(|e| crate::error::describe_io(&e))?;
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    file.take(limit + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| crate::error::describe_io(&e))?;
    Ok(bytes)
}

/// Reads a model, with a clear error for anything that is not a usable grove model.
pub fn load(path: &Path) -> Result<Segmenter> {
    load_with_sha256(path).map(|(model, _)| model)
}

/// Reads a model and returns the SHA-256 of its file too: batch outputs record it, so a
/// re-run can tell whether they were made by this very model file.
pub fn load_with_sha256(path: &Path) -> Result<(Segmenter, String)> {
    let bytes = read_bounded(path).map_err(|message| GroveError::model(path, message))?;
    let model = from_bytes(&bytes).map_err(|message| GroveError::model(path, message))?;
    Ok((model, sha256_hex(&bytes)))
}

/// SHA-256 of `bytes` as lower-case hex (what `sha256sum` prints).
pub fn sha256_hex(bytes: &[u8]) -> String {
    use sha2::{Digest, Sha256};
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

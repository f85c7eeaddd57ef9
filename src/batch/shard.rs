//! `--shard K/N`: which images one of N cooperating processes handles.
//!
//! An image belongs to shard `u64(SHA-256(stem)[0..8], big-endian) mod N`. The assignment
//! depends only on the file's stem (the name its outputs get) and on N, so every process
//! of a job array agrees on it whatever order, folder spelling or list file it was given,
//! and together the N shards cover every image exactly once. SHA-256 rather than Rust's
//! `DefaultHasher` (its algorithm may change between Rust releases, and `HashMap`'s is
//! randomised per process) or plain FNV-1a (whose lowest bit is just the parity of the
//! bytes' lowest bits, so `mod 2` splits names like `frame_0001`… badly): it is stable,
//! well mixed in every bit, and anyone can check an assignment with `sha256sum`.
//! Hashing balances shards only statistically: with few images per shard, sizes vary.

use std::fmt;
use std::path::{Path, PathBuf};
use std::str::FromStr;

use sha2::{Digest, Sha256};

use crate::dataset::stem_of;
use crate::error::GroveError;

/// Shard `index` of `count` (0 ≤ index < count).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shard {
    pub index: usize,
    pub count: usize,
}

impl Shard {
    /// The whole input as one shard.
    pub const ALL: Shard = Shard { index: 0, count: 1 };

    pub fn new(index: usize, count: usize) -> Result<Shard, GroveError> {
        if count == 0 || index >= count {
            return Err(GroveError::Config(format!(
                "--shard {index}/{count}: need 0 <= K < N (shards are numbered from 0)"
            )));
        }
        Ok(Shard { index, count })
    }

    /// True when the image with this stem belongs to this shard.
    pub fn contains_stem(&self, stem: &str) -> bool {
        shard_of(stem, self.count) == self.index
    }

    /// The paths of this shard, in their given order.
    pub fn select(&self, paths: Vec<PathBuf>) -> Vec<PathBuf> {
        paths
            .into_iter()
            .filter(|p: &PathBuf| self.contains_stem(&stem_of(Path::new(p))))
            .collect()
    }
}

/// The shard (0..count) an image stem belongs to.
pub fn shard_of(stem: &str, count: usize) -> usize {
    let digest = Sha256::digest(stem.as_bytes());
    let head = u64::from_be_bytes(digest[..8].try_into().expect("a SHA-256 has 32 bytes"));
    (head % count as u64) as usize
}

impl FromStr for Shard {
    /// A plain message: clap puts it after "invalid value 'K/N' for '--shard'".
    type Err = String;

    fn from_str(s: &str) -> Result<Shard, String> {
        let bad = || "expected K/N with 0 <= K < N, e.g. 0/4 … 3/4".to_string();
        let (k, n) = s.split_once('/').ok_or_else(bad)?;
        let k: usize = k.trim().parse().map_err(|_| bad())?;
        let n: usize = n.trim().parse().map_err(|_| bad())?;
        if n == 0 || k >= n {
            return Err(format!(
                "need 0 <= K < N (shards are numbered from 0, so {n} shards are 0/{n} … {}/{n})",
                n.max(1) - 1
            ));
        }
        Ok(Shard { index: k, count: n })
    }
}

impl fmt::Display for Shard {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.index, self.count)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_and_refuses() {
        assert_eq!(
            "2/5".parse::<Shard>().unwrap(),
            Shard { index: 2, count: 5 }
        );
        for bad in ["5/5", "1/0", "x/2", "3", "-1/4", ""] {
            assert!(bad.parse::<Shard>().is_err(), "{bad}");
        }
    }

    /// Published SHA-256 test vector (FIPS 180-2, "abc" → ba7816bf 8f01cfea …), so the
    /// assignment is the documented one: 0xba7816bf8f01cfea mod N.
    #[test]
    fn assignment_follows_the_documented_hash() {
        let head: u64 = 0xba7816bf8f01cfea;
        for n in [1, 2, 3, 7, 1000] {
            assert_eq!(shard_of("abc", n), (head % n as u64) as usize);
        }
    }
}

//! What stands between the workspace and other programs on the machine or web pages in the
//! user's browser: the access token, the Host / Origin checks, and the rules for which
//! files a request may touch.
//!
//! - Token: 32 bytes from the operating system's RNG, printed in the URL once; the first
//!   visit turns it into an HttpOnly, SameSite=Strict cookie (named after the port, because
//!   browsers do not separate cookies by port). Compared in constant time.
//! - Host: only `localhost` or an IP literal (with our port), or the name given to `--listen`.
//!   A DNS-rebinding page reaches us under its own host name, which this refuses.
//! - Origin / Sec-Fetch-Site: a request started by another site is refused, token or not.
//! - Files: requests name images by stem; a stem is looked up in the dataset's listing (never
//!   joined as a path), and the file found must resolve, symlinks followed, inside DATA.

use std::path::{Path, PathBuf};

use rand::RngCore;

/// The workspace's access token (64 hex characters).
#[derive(Clone)]
pub struct Token(String);

impl Token {
    /// A fresh token from the operating system's random number generator.
    pub fn generate() -> Token {
        let mut bytes = [0u8; 32];
        rand::rngs::OsRng.fill_bytes(&mut bytes);
        Token(bytes.iter().map(|b| format!("{b:02x}")).collect())
    }

    pub fn as_str(&self) -> &str {
        &self.0
    }

    /// Compares in time that does not depend on where the strings differ, so the token
    /// cannot be guessed byte by byte from response times.
    pub fn matches(&self, candidate: &str) -> bool {
        constant_time_eq(self.0.as_bytes(), candidate.as_bytes())
    }
}

/// Equality whose running time depends only on the lengths.
pub fn constant_time_eq(a: &[u8], b: &[u8]) -> bool {
    if a.len() != b.len() {
        return false;
    }
    let diff = a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y));
    std::hint::black_box(diff) == 0
}

/// Name of the cookie that carries the token for the server on `port`.
pub fn cookie_name(port: u16) -> String {
    format!("grove-token-{port}")
}

/// The value of cookie `name` in a `Cookie` header.
pub fn cookie_value<'a>(header: &'a str, name: &str) -> Option<&'a str> {
    header.split(';').find_map(|kv| {
        let (k, v) = kv.trim().split_once('=')?;
        (k == name).then_some(v)
    })
}

/// Whether a request's `Host` header names this server in a way a rebinding attack cannot
/// produce: `localhost` or an IP literal, or `extra_host` (the `--listen` name), with our port.
pub fn host_allowed(host: &str, port: u16, extra_host: Option<&str>) -> bool {
    let Some((name, p)) = host.rsplit_once(':') else {
        return false;
    };
    if p != port.to_string() {
        return false;
    }
    let bare = name.trim_start_matches('[').trim_end_matches(']');
    name.eq_ignore_ascii_case("localhost")
        || bare.parse::<std::net::IpAddr>().is_ok()
        || extra_host.is_some_and(|h| h.eq_ignore_ascii_case(name))
}

/// Whether an `Origin` header (when the browser sent one) is this server itself.
pub fn origin_allowed(origin: &str, port: u16, extra_host: Option<&str>) -> bool {
    origin
        .strip_prefix("http://")
        .is_some_and(|host| host_allowed(host, port, extra_host))
}

/// An image name as it may appear in a request: a plain file stem, no separators, no
/// leading dot (so neither `..` nor hidden files), no control characters.
pub fn valid_name(name: &str) -> bool {
    !name.is_empty()
        && name.len() <= 255
        && !name.starts_with('.')
        && !name
            .chars()
            .any(|c| c == '/' || c == '\\' || c == ':' || c.is_control())
}

/// `path` with symlinks resolved, if that lies inside `root` (itself canonical). A path that
/// does not exist yet is checked through its parent folder.
pub fn inside(root: &Path, path: &Path) -> Option<PathBuf> {
    let resolved = match path.canonicalize() {
        Ok(p) => p,
        Err(_) => {
            let parent = path.parent()?.canonicalize().ok()?;
            if path.symlink_metadata().is_ok() {
                // A dangling symlink: never follow it.
                return None;
            }
            parent.join(path.file_name()?)
        }
    };
    resolved.starts_with(root).then_some(resolved)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tokens_are_random_hex_and_compare_exactly() {
        let (a, b) = (Token::generate(), Token::generate());
        assert_eq!(a.as_str().len(), 64);
        assert!(a.as_str().chars().all(|c| c.is_ascii_hexdigit()));
        assert_ne!(a.as_str(), b.as_str());
        assert!(a.matches(a.as_str()));
        assert!(!a.matches(b.as_str()));
        assert!(!a.matches(&a.as_str()[..63]));
        assert!(!a.matches(""));
    }

    #[test]
    fn hosts_and_origins() {
        assert!(host_allowed("127.0.0.1:8080", 8080, None));
        assert!(host_allowed("localhost:8080", 8080, None));
        assert!(host_allowed("[::1]:8080", 8080, None));
        assert!(!host_allowed("127.0.0.1:8081", 8080, None));
        assert!(!host_allowed("evil.example:8080", 8080, None));
        assert!(!host_allowed("127.0.0.1", 8080, None));
        assert!(host_allowed("lab-pc:8080", 8080, Some("lab-pc")));
        assert!(origin_allowed("http://127.0.0.1:8080", 8080, None));
        assert!(!origin_allowed("http://evil.example:8080", 8080, None));
        assert!(!origin_allowed("null", 8080, None));
    }

    #[test]
    fn names_and_cookies() {
        for bad in ["", "..", "../x", "a/b", "a\\b", ".hidden", "c:x", "a\nb"] {
            assert!(!valid_name(bad), "{bad:?}");
        }
        assert!(valid_name("field 07"));
        assert_eq!(
            cookie_value("a=1; grove-token-9=abc; b=2", "grove-token-9"),
            Some("abc")
        );
        assert_eq!(cookie_value("a=1", "grove-token-9"), None);
    }

    #[test]
    fn paths_must_stay_inside_the_root() {
        let dir = tempfile::tempdir().unwrap();
        let root = dir.path().canonicalize().unwrap();
        std::fs::write(root.join("in.png"), b"x").unwrap();
        assert!(inside(&root, &root.join("in.png")).is_some());
        assert!(inside(&root, &root.join("new.png")).is_some());
        assert!(inside(&root, &root.join("../outside.png")).is_none());
        #[cfg(unix)]
        {
            let out = tempfile::tempdir().unwrap();
            std::fs::write(out.path().join("secret"), b"s").unwrap();
            std::os::unix::fs::symlink(out.path().join("secret"), root.join("link.png")).unwrap();
            assert!(inside(&root, &root.join("link.png")).is_none());
            std::os::unix::fs::symlink(root.join("gone"), root.join("dangling.png")).unwrap();
            assert!(inside(&root, &root.join("dangling.png")).is_none());
        }
    }
}

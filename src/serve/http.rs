//! The HTTP boundary: tiny_http requests become plain [`Req`] values (path segments decoded,
//! headers lower-cased, body read up to a limit) and [`Reply`] values go back out with the
//! headers every response carries. Handlers never see the HTTP library.

use std::io::Read;

/// Largest body accepted for a label upload: a run-length coded 4000 × 3000 map of pure noise
/// is 60 MB; real scribbles are a few kB.
pub const MAX_LABEL_BODY: usize = 64 << 20;
/// Largest body for everything else (class tables, commands).
pub const MAX_BODY: usize = 1 << 20;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Method {
    Get,
    Head,
    Post,
    Put,
    Other,
}

/// A request as the handlers see it.
pub struct Req {
    pub method: Method,
    /// Decoded path segments (`/api/labels/a%20b` → `["api", "labels", "a b"]`).
    pub segments: Vec<String>,
    pub query: Vec<(String, String)>,
    /// Header names lower-cased.
    pub headers: Vec<(String, String)>,
    pub body: Vec<u8>,
}

impl Req {
    pub fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
    }

    pub fn query(&self, name: &str) -> Option<&str> {
        self.query
            .iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
    }

    /// The segments as `&str`, for matching.
    pub fn path(&self) -> Vec<&str> {
        self.segments.iter().map(|s| s.as_str()).collect()
    }
}

/// A response.
pub struct Reply {
    pub status: u16,
    pub content_type: &'static str,
    pub headers: Vec<(String, String)>,
    pub body: Vec<u8>,
}

impl Reply {
    pub fn new(status: u16, content_type: &'static str, body: Vec<u8>) -> Reply {
        Reply {
            status,
            content_type,
            headers: Vec::new(),
            body,
        }
    }

    pub fn json(status: u16, value: &serde_json::Value) -> Reply {
        Reply::new(status, "application/json", value.to_string().into_bytes())
    }

    /// An error the page shows to the user as is.
    pub fn error(status: u16, message: impl Into<String>) -> Reply {
        Reply::json(status, &serde_json::json!({ "error": message.into() }))
    }

    pub fn with_header(mut self, name: &str, value: impl Into<String>) -> Reply {
        self.headers.push((name.to_string(), value.into()));
        self
    }
}

/// `%XX` decoding (and nothing else: `+` stays `+` in paths). Invalid UTF-8 → `None`.
pub fn percent_decode(s: &str) -> Option<String> {
    let b = s.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut i = 0;
    while i < b.len() {
        if b[i] == b'%' {
            let hex = s.get(i + 1..i + 3)?;
            out.push(u8::from_str_radix(hex, 16).ok()?);
            i += 3;
        } else {
            out.push(b[i]);
            i += 1;
        }
    }
    String::from_utf8(out).ok()
}

fn parse_query(q: &str) -> Vec<(String, String)> {
    q.split('&')
        .filter(|kv| !kv.is_empty())
        .filter_map(|kv| {
            let (k, v) = kv.split_once('=').unwrap_or((kv, ""));
            Some((percent_decode(k)?, percent_decode(&v.replace('+', " "))?))
        })
        .collect()
}

/// What went wrong turning a request into a [`Req`].
pub enum Refused {
    BadRequest(&'static str),
    TooLarge(usize),
}

/// Reads the request line and headers; the body is read later by [`read_body`], after the
/// request has passed the security checks.
pub fn head_of(rq: &tiny_http::Request) -> Result<Req, Refused> {
    let method = match rq.method() {
        tiny_http::Method::Get => Method::Get,
        tiny_http::Method::Head => Method::Head,
        tiny_http::Method::Post => Method::Post,
        tiny_http::Method::Put => Method::Put,
        _ => Method::Other,
    };
    let url = rq.url();
    let (path, query) = url.split_once('?').unwrap_or((url, ""));
    let mut segments = Vec::new();
    for seg in path.split('/').filter(|s| !s.is_empty()) {
        segments.push(percent_decode(seg).ok_or(Refused::BadRequest("bad path encoding"))?);
    }
    let headers = rq
        .headers()
        .iter()
        .map(|h| {
            (
                h.field.as_str().as_str().to_ascii_lowercase(),
                h.value.as_str().to_string(),
            )
        })
        .collect();
    Ok(Req {
        method,
        segments,
        query: parse_query(query),
        headers,
        body: Vec::new(),
    })
}

/// The body limit for a path.
pub fn body_limit(req: &Req) -> usize {
    if req.segments.first().is_some_and(|s| s == "api")
        && req.segments.get(1).is_some_and(|s| s == "labels")
    {
        MAX_LABEL_BODY
    } else {
        MAX_BODY
    }
}

/// Reads the body, refusing (before reading anything) a declared length above `limit`, and
/// stopping at `limit` for bodies without a declared length.
pub fn read_body(rq: &mut tiny_http::Request, limit: usize) -> Result<Vec<u8>, Refused> {
    if let Some(n) = rq.body_length() {
        if n > limit {
            return Err(Refused::TooLarge(limit));
        }
    }
    let mut body = Vec::new();
    rq.as_reader()
        .take(limit as u64 + 1)
        .read_to_end(&mut body)
        .map_err(|_| Refused::BadRequest("cannot read the request body"))?;
    if body.len() > limit {
        return Err(Refused::TooLarge(limit));
    }
    Ok(body)
}

/// Sends `reply` with the headers every response carries: no caching of API data, no
/// framing by other sites, no MIME sniffing, no referrer (the first URL holds the token), and
/// a content security policy that allows only the page's own embedded files.
pub fn send(rq: tiny_http::Request, reply: Reply, close: bool) {
    let mut headers = vec![
        ("Content-Type".to_string(), reply.content_type.to_string()),
        ("X-Content-Type-Options".into(), "nosniff".into()),
        ("X-Frame-Options".into(), "DENY".into()),
        ("Referrer-Policy".into(), "no-referrer".into()),
        (
            "Content-Security-Policy".into(),
            "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' blob: data:; connect-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"
                .into(),
        ),
        ("Cache-Control".into(), "no-store".into()),
    ];
    if close {
        headers.push(("Connection".into(), "close".into()));
    }
    headers.extend(reply.headers);
    let mut resp = tiny_http::Response::from_data(reply.body).with_status_code(reply.status);
    for (k, v) in headers {
        if let Ok(h) = tiny_http::Header::from_bytes(k.as_bytes(), v.as_bytes()) {
            resp.add_header(h);
        }
    }
    // The client may have gone away; nothing to do about it.
    let _ = rq.respond(resp);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decoding() {
        assert_eq!(percent_decode("a%20b").as_deref(), Some("a b"));
        assert_eq!(percent_decode("%2e%2E").as_deref(), Some(".."));
        assert_eq!(percent_decode("%zz"), None);
        assert_eq!(percent_decode("%"), None);
        assert_eq!(
            parse_query("token=ab&x=1+2"),
            vec![("token".into(), "ab".into()), ("x".into(), "1 2".into())]
        );
    }
}

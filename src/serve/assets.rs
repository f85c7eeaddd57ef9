//! The page: plain HTML, CSS and JS compiled into the binary, so the workspace runs with no
//! network and nothing fetched at run time.

use super::http::Reply;

const INDEX: &str = include_str!("page/index.html");
const STYLE: &str = include_str!("page/style.css");
const APP: &str = include_str!("page/app.js");

pub fn page() -> Reply {
    Reply::new(200, "text/html; charset=utf-8", INDEX.as_bytes().to_vec())
}

pub fn asset(name: &str) -> Reply {
    match name {
        "style.css" => Reply::new(200, "text/css; charset=utf-8", STYLE.as_bytes().to_vec()),
        "app.js" => Reply::new(
            200,
            "text/javascript; charset=utf-8",
            APP.as_bytes().to_vec(),
        ),
        _ => Reply::error(404, "no such asset"),
    }
}

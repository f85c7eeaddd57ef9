//! The security gate every request passes, then the URL table.

use std::sync::Arc;

use super::http::{self, Method, Refused, Reply, Req};
use super::security::{cookie_name, cookie_value, host_allowed, origin_allowed};
use super::{assets, dataset_api, jobs, Workspace};

/// Checks, reads and answers one request.
pub fn handle(ws: &Arc<Workspace>, mut rq: tiny_http::Request) {
    let mut req = match http::head_of(&rq) {
        Ok(r) => r,
        Err(_) => return http::send(rq, Reply::error(400, "malformed request"), true),
    };
    if let Err(reply) = gate(ws, &req) {
        return http::send(rq, reply, true);
    }
    if req.method == Method::Get && req.segments.is_empty() && req.query("token").is_some() {
        // First visit from the printed URL: move the token into a cookie and drop it from
        // the address bar (and so from history and screenshots).
        let cookie = format!(
            "{}={}; Path=/; HttpOnly; SameSite=Strict",
            cookie_name(ws.port),
            ws.token.as_str()
        );
        let reply = Reply::new(303, "text/plain", b"see /".to_vec())
            .with_header("Location", "/")
            .with_header("Set-Cookie", cookie);
        return http::send(rq, reply, false);
    }
    match http::read_body(&mut rq, http::body_limit(&req)) {
        Ok(body) => req.body = body,
        Err(Refused::TooLarge(limit)) => {
            let reply = Reply::error(
                413,
                format!("request body larger than the limit of {limit} bytes"),
            );
            return http::send(rq, reply, true);
        }
        Err(Refused::BadRequest(m)) => return http::send(rq, Reply::error(400, m), true),
    }
    let reply = route(ws, &req);
    http::send(rq, reply, false)
}

/// Host, Origin and token checks, in that order (a foreign page is refused even if it has
/// somehow learnt the token).
fn gate(ws: &Workspace, req: &Req) -> Result<(), Reply> {
    let host_ok = req
        .header("host")
        .is_some_and(|h| host_allowed(h, ws.port, None));
    if !host_ok {
        return Err(Reply::error(
            403,
            "unexpected Host header: open the workspace through the URL grove printed",
        ));
    }
    let origin = req.header("origin");
    if origin.is_some_and(|o| !origin_allowed(o, ws.port, None))
        || req.header("sec-fetch-site") == Some("cross-site")
    {
        return Err(Reply::error(403, "cross-site request refused"));
    }
    let given = req
        .header("x-grove-token")
        .or_else(|| {
            req.header("cookie")
                .and_then(|c| cookie_value(c, &cookie_name(ws.port)))
        })
        .or_else(|| {
            (req.method == Method::Get && req.segments.is_empty())
                .then(|| req.query("token"))
                .flatten()
        });
    match given {
        None => return Err(Reply::error(
            401,
            "access token missing: open the URL that `grove label` printed (it ends in ?token=…)",
        )),
        Some(t) if !ws.token.matches(t) => {
            return Err(Reply::error(
                403,
                "wrong access token: open the URL that `grove label` printed last",
            ))
        }
        Some(_) => {}
    }
    // Writes must come from our own page (browsers send Origin on them) or from a client
    // that sets the token header itself: a plain form on another site can do neither.
    let writes = matches!(req.method, Method::Post | Method::Put | Method::Other);
    if writes && origin.is_none() && req.header("x-grove-token").is_none() {
        return Err(Reply::error(
            403,
            "write without Origin or token header refused",
        ));
    }
    Ok(())
}

fn route(ws: &Arc<Workspace>, req: &Req) -> Reply {
    use Method::*;
    match (req.method, req.path().as_slice()) {
        (Get | Head, []) => assets::page(),
        (Get | Head, ["assets", name]) => assets::asset(name),
        (Get, ["api", "state"]) => dataset_api::state(ws),
        (Put | Post, ["api", "classes"]) => dataset_api::put_classes(ws, req),
        (Get, ["api", "images", name]) => dataset_api::image_info(ws, name),
        (Get, ["api", "images", name, "tiles", level, x, y]) => {
            dataset_api::tile(ws, name, level, x, y)
        }
        (Get, ["api", "labels", name]) => dataset_api::get_labels(ws, name),
        (Put | Post, ["api", "labels", name]) => dataset_api::put_labels(ws, name, req),
        (Post, ["api", "train"]) => jobs::start_training(ws),
        (Get, ["api", "train"]) => jobs::training_status(ws),
        (Get, ["api", "layers", name]) => jobs::layers(ws, name),
        (Get, ["api", "layers", name, kind]) => jobs::layer_png(ws, name, kind),
        (Get | Head | Put | Post, _) => Reply::error(404, "no such page or API call"),
        (Other, _) => Reply::error(405, "method not allowed"),
    }
}

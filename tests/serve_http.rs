//! The workspace server (`grove label`) through real HTTP on loopback: the security rules
//! (token, Host, Origin, paths, body size), label saving with versions and history, restart
//! after a kill, and training from the API. The binary is started as a user would start it.

use std::io::{Read, Write};
use std::net::TcpStream;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use grove::dataset::{Dataset, LabelOptions, UNLABELLED};
use grove::serve::rle;

struct Server {
    child: Child,
    _stdout: std::process::ChildStdout,
    port: u16,
    token: String,
}

impl Drop for Server {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn start(data: &Path) -> Server {
    let mut child = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(["label", data.to_str().unwrap()])
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut out = child.stdout.take().unwrap();
    let mut text = String::new();
    let mut buf = [0u8; 256];
    while !text.contains("token=") || !text[text.find("token=").unwrap()..].contains('\n') {
        let n = out.read(&mut buf).unwrap();
        assert!(n > 0, "grove label exited: {text}");
        text.push_str(&String::from_utf8_lossy(&buf[..n]));
    }
    let url = text
        .split_whitespace()
        .find(|w| w.starts_with("http://"))
        .unwrap()
        .to_string();
    assert!(url.starts_with("http://127.0.0.1:"), "{url}");
    let port: u16 = url["http://127.0.0.1:".len()..]
        .split('/')
        .next()
        .unwrap()
        .parse()
        .unwrap();
    let token = url.split("token=").nth(1).unwrap().to_string();
    assert_eq!(token.len(), 64);
    Server {
        child,
        _stdout: out,
        port,
        token,
    }
}

struct Resp {
    status: u16,
    headers: Vec<(String, String)>,
    body: Vec<u8>,
}

impl Resp {
    fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(k, _)| k.eq_ignore_ascii_case(name))
            .map(|(_, v)| v.as_str())
    }
    fn json(&self) -> serde_json::Value {
        serde_json::from_slice(&self.body)
            .unwrap_or_else(|_| panic!("not JSON: {}", String::from_utf8_lossy(&self.body)))
    }
}

/// One HTTP/1.1 request on a fresh connection. `headers` may override Host.
fn http(port: u16, method: &str, path: &str, headers: &[(&str, &str)], body: &[u8]) -> Resp {
    let mut s = TcpStream::connect(("127.0.0.1", port)).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(60))).unwrap();
    let mut head = format!("{method} {path} HTTP/1.1\r\nConnection: close\r\n");
    if !headers.iter().any(|(k, _)| k.eq_ignore_ascii_case("host")) {
        head += &format!("Host: 127.0.0.1:{port}\r\n");
    }
    for (k, v) in headers {
        head += &format!("{k}: {v}\r\n");
    }
    if !headers
        .iter()
        .any(|(k, _)| k.eq_ignore_ascii_case("content-length"))
    {
        head += &format!("Content-Length: {}\r\n", body.len());
    }
    head += "\r\n";
    s.write_all(head.as_bytes()).unwrap();
    // The server may refuse before reading the body and close; that is what some tests want.
    let _ = s.write_all(body);
    let mut raw = Vec::new();
    if let Err(e) = s.read_to_end(&mut raw) {
        eprintln!("read error after {} bytes: {e}", raw.len());
    }
    let split = raw
        .windows(4)
        .position(|w| w == b"\r\n\r\n")
        .expect("no response head");
    let head = String::from_utf8_lossy(&raw[..split]).into_owned();
    let mut lines = head.lines();
    let status = lines
        .next()
        .unwrap()
        .split_whitespace()
        .nth(1)
        .unwrap()
        .parse()
        .unwrap();
    let headers = lines
        .filter_map(|l| l.split_once(':'))
        .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
        .collect();
    Resp {
        status,
        headers,
        body: raw[split + 4..].to_vec(),
    }
}

impl Server {
    fn get(&self, path: &str) -> Resp {
        http(
            self.port,
            "GET",
            path,
            &[("X-Grove-Token", &self.token)],
            b"",
        )
    }
    fn send(&self, method: &str, path: &str, extra: &[(&str, &str)], body: &[u8]) -> Resp {
        let mut h = vec![("X-Grove-Token", self.token.as_str())];
        h.extend_from_slice(extra);
        http(self.port, method, path, &h, body)
    }
}

/// A dataset folder of `n` demo scenes (size px) with images only.
fn images_only(dir: &Path, n: u32, size: usize) -> PathBuf {
    let data = dir.join("data");
    grove::demo::write_demo_dataset(&data, 0..n, size, 3).unwrap();
    std::fs::remove_dir_all(data.join("labels")).unwrap();
    std::fs::remove_file(data.join("classes.toml")).unwrap();
    data
}

fn make_classes(s: &Server) {
    let r = s.send(
        "PUT",
        "/api/classes",
        &[("Content-Type", "application/json")],
        br##"{"classes":[{"name":"soil","color":"#8a6a4a"},{"name":"crop","color":"#22aa22"}]}"##,
    );
    assert_eq!(r.status, 200, "{}", String::from_utf8_lossy(&r.body));
}

#[test]
fn requests_need_the_token_and_our_own_host_and_origin() {
    let t = tempfile::tempdir().unwrap();
    let data = images_only(t.path(), 1, 64);
    let s = start(&data);
    let p = s.port;
    // No token at all → 401; a wrong one → 403.
    assert_eq!(http(p, "GET", "/", &[], b"").status, 401);
    assert_eq!(http(p, "GET", "/api/state", &[], b"").status, 401);
    let wrong = "0".repeat(64);
    assert_eq!(
        http(p, "GET", "/api/state", &[("X-Grove-Token", &wrong)], b"").status,
        403
    );
    assert_eq!(
        http(p, "GET", &format!("/?token={wrong}"), &[], b"").status,
        403
    );
    // The printed URL sets an HttpOnly, SameSite=Strict cookie and drops the token from the URL.
    let r = http(p, "GET", &format!("/?token={}", s.token), &[], b"");
    assert_eq!(r.status, 303);
    assert_eq!(r.header("location"), Some("/"));
    let cookie = r.header("set-cookie").unwrap().to_string();
    assert!(
        cookie.contains("HttpOnly") && cookie.contains("SameSite=Strict"),
        "{cookie}"
    );
    let pair = cookie.split(';').next().unwrap();
    let page = http(p, "GET", "/", &[("Cookie", pair)], b"");
    assert_eq!(page.status, 200);
    assert!(page
        .header("content-security-policy")
        .unwrap()
        .contains("script-src 'self'"));
    assert_eq!(
        http(p, "GET", "/api/state", &[("Cookie", pair)], b"").status,
        200
    );
    // DNS rebinding: a page under another host name that resolves to 127.0.0.1.
    let host = format!("evil.example:{p}");
    assert_eq!(
        http(
            p,
            "GET",
            "/api/state",
            &[("Host", &host), ("Cookie", pair)],
            b""
        )
        .status,
        403
    );
    // A foreign Origin is refused even with a valid token.
    let r = http(
        p,
        "GET",
        "/api/state",
        &[
            ("X-Grove-Token", &s.token),
            ("Origin", "http://evil.example"),
        ],
        b"",
    );
    assert_eq!(r.status, 403);
    let r = http(
        p,
        "PUT",
        "/api/classes",
        &[("Cookie", pair), ("Origin", "http://evil.example")],
        b"{}",
    );
    assert_eq!(r.status, 403);
    // Our own Origin is fine; a write with neither Origin nor token header is not.
    let own = format!("http://127.0.0.1:{p}");
    assert_eq!(
        http(
            p,
            "GET",
            "/api/state",
            &[("Cookie", pair), ("Origin", &own)],
            b""
        )
        .status,
        200
    );
    assert_eq!(
        http(p, "POST", "/api/train", &[("Cookie", pair)], b"").status,
        403
    );
}

#[test]
fn only_files_inside_the_dataset_are_touched_and_bodies_are_limited() {
    let t = tempfile::tempdir().unwrap();
    let data = images_only(t.path(), 1, 64);
    let secret = t.path().join("secret.png");
    std::fs::write(&secret, b"SECRET-BYTES").unwrap();
    #[cfg(unix)]
    std::os::unix::fs::symlink(&secret, data.join("images/escape.png")).unwrap();
    let s = start(&data);
    make_classes(&s);
    for path in [
        "/api/labels/..%2F..%2Fsecret",
        "/api/labels/%2E%2E",
        "/api/images/..%2Fsecret/tiles/0/0/0",
        "/api/labels/%2Fetc%2Fpasswd",
        "/api/labels/.grove-history",
    ] {
        let r = s.get(path);
        assert!(r.status == 400 || r.status == 404, "{path}: {}", r.status);
        assert!(!String::from_utf8_lossy(&r.body).contains("SECRET"));
    }
    assert_eq!(s.get("/../secret.png").status, 404);
    #[cfg(unix)]
    {
        let r = s.get("/api/images/escape/tiles/0/0/0");
        assert_eq!(r.status, 404, "symlink out of DATA");
        assert!(!String::from_utf8_lossy(&r.body).contains("SECRET"));
        // A label file that is a symlink out of DATA is neither read nor written through.
        std::fs::create_dir_all(data.join("labels")).unwrap();
        std::os::unix::fs::symlink(&secret, data.join("labels/farm_000.png")).unwrap();
        assert_eq!(s.get("/api/labels/farm_000").status, 404);
        let body = rle::encode(&vec![0u8; 64 * 64]);
        let r = s.send(
            "PUT",
            "/api/labels/farm_000",
            &[("If-Match", "\"none\"")],
            &body,
        );
        assert_eq!(r.status, 404);
        assert_eq!(std::fs::read(&secret).unwrap(), b"SECRET-BYTES");
    }
    // Oversized bodies: refused from the declared length, before the body is read.
    let big = vec![b' '; 2 << 20];
    assert_eq!(s.send("PUT", "/api/classes", &[], &big).status, 413);
    let r = s.send(
        "PUT",
        "/api/labels/farm_000",
        &[("Content-Length", "200000000")],
        b"",
    );
    assert_eq!(r.status, 413);
}

/// Reads a dataset's label file the way `grove train` does.
fn labels_on_disk(data: &Path, stem: &str) -> Vec<u8> {
    let ds = Dataset::open(data, LabelOptions::default()).unwrap();
    let e = ds.entries.iter().find(|e| e.stem == stem).unwrap();
    ds.load_pair(e).unwrap().1.indices
}

#[test]
fn labels_save_with_versions_history_and_survive_a_kill() {
    let t = tempfile::tempdir().unwrap();
    let data = images_only(t.path(), 2, 64);
    let s = start(&data);
    // Class edits: ids assigned and kept, names validated, written to classes.toml.
    make_classes(&s);
    let st = s.get("/api/state").json();
    assert_eq!(st["classes"][1]["name"], "crop");
    let crop_id = st["classes"][1]["id"].as_u64().unwrap();
    let r = s.send(
        "PUT",
        "/api/classes",
        &[],
        format!(r##"{{"classes":[{{"id":0,"name":"bare soil","color":"#8a6a4a"}},{{"id":{crop_id},"name":"crop","color":"#00ff00"}},{{"name":"<script>alert(1)","color":"#0000ff"}}]}}"##).as_bytes(),
    );
    assert_eq!(r.status, 200, "{}", String::from_utf8_lossy(&r.body));
    let bad = s.send(
        "PUT",
        "/api/classes",
        &[],
        br##"{"classes":[{"id":0,"name":"../x","color":"#8a6a4a"}]}"##,
    );
    assert_eq!(bad.status, 400);
    let table = grove::dataset::ClassTable::load(&data.join("classes.toml"), 255).unwrap();
    assert_eq!(table.names(), vec!["bare soil", "crop", "<script>alert(1)"]);

    // Fresh image: all unlabelled, version "none".
    let r = s.get("/api/labels/farm_000");
    assert_eq!(r.status, 200);
    assert_eq!(r.header("etag"), Some("\"none\""));
    assert_eq!(
        rle::decode(&r.body, 64 * 64).unwrap(),
        vec![UNLABELLED; 64 * 64]
    );

    let mut painted = vec![UNLABELLED; 64 * 64];
    for (i, v) in painted.iter_mut().enumerate() {
        if i % 64 < 10 {
            *v = 0;
        } else if i / 64 > 50 {
            *v = 1;
        }
    }
    let r = s.send(
        "PUT",
        "/api/labels/farm_000",
        &[("If-Match", "\"none\"")],
        &rle::encode(&painted),
    );
    assert_eq!(r.status, 200, "{}", String::from_utf8_lossy(&r.body));
    let v1 = r.json()["version"].as_str().unwrap().to_string();
    assert_eq!(
        labels_on_disk(&data, "farm_000"),
        painted,
        "the CLI reads what the page wrote"
    );

    // A second tab still at "none" is refused with a clear message; nothing changes.
    let stale = s.send(
        "PUT",
        "/api/labels/farm_000",
        &[("If-Match", "\"none\"")],
        &rle::encode(&vec![2; 64 * 64]),
    );
    assert_eq!(stale.status, 409);
    assert!(stale.json()["error"]
        .as_str()
        .unwrap()
        .contains("another tab"));
    assert_eq!(labels_on_disk(&data, "farm_000"), painted);
    // Bad bodies: wrong length, unknown class.
    assert_eq!(
        s.send(
            "PUT",
            "/api/labels/farm_000",
            &[("If-Match", &v1)],
            &rle::encode(&[0; 10])
        )
        .status,
        400
    );
    assert_eq!(
        s.send(
            "PUT",
            "/api/labels/farm_000",
            &[("If-Match", &v1)],
            &rle::encode(&vec![7; 64 * 64])
        )
        .status,
        400
    );

    // The next save keeps the previous version in the history.
    painted[0] = 2;
    let r = s.send(
        "PUT",
        "/api/labels/farm_000",
        &[("If-Match", &format!("\"{v1}\""))],
        &rle::encode(&painted),
    );
    assert_eq!(r.status, 200);
    let v2 = r.json()["version"].as_str().unwrap().to_string();
    let history = grove::dataset::save::history(&data, "farm_000").unwrap();
    assert_eq!(history.len(), 1);

    // Kill the server (no shutdown) and start again: everything saved is there.
    drop(s);
    let s = start(&data);
    let r = s.get("/api/labels/farm_000");
    assert_eq!(r.header("etag"), Some(format!("\"{v2}\"").as_str()));
    assert_eq!(rle::decode(&r.body, 64 * 64).unwrap(), painted);
    let st = s.get("/api/state").json();
    assert_eq!(
        st["images"][0]["labelled"],
        serde_json::json!([640 - 1, 13 * 64 - 10 * 13, 1])
    );
}

#[test]
fn training_runs_in_the_background_and_layers_follow() {
    let t = tempfile::tempdir().unwrap();
    let data = images_only(t.path(), 2, 96);
    let s = start(&data);
    make_classes(&s);
    assert_eq!(s.get("/api/layers/farm_000").status, 409, "no model yet");
    let n = 96 * 96;
    let mut painted = vec![UNLABELLED; n];
    for (i, v) in painted.iter_mut().enumerate() {
        match i % 96 {
            0..=20 => *v = 0,
            70..=95 => *v = 1,
            _ => {}
        }
    }
    let r = s.send(
        "PUT",
        "/api/labels/farm_001",
        &[("If-Match", "none")],
        &rle::encode(&painted),
    );
    assert_eq!(r.status, 200);
    assert_eq!(s.send("POST", "/api/train", &[], b"").status, 202);
    // The server keeps answering while it trains.
    assert_eq!(s.get("/api/state").status, 200);
    let t0 = Instant::now();
    let status = loop {
        let st = s.get("/api/train").json();
        if st["state"] != "running" {
            break st;
        }
        assert!(
            t0.elapsed() < Duration::from_secs(120),
            "training did not finish"
        );
        std::thread::sleep(Duration::from_millis(100));
    };
    assert_eq!(status["state"], "done", "{status}");
    assert!(data.join("model.grove").is_file());
    let layers = s.get("/api/layers/farm_000");
    assert_eq!(layers.status, 200);
    let l = layers.json();
    let total: u64 = l["areas"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| a["pixels"].as_u64().unwrap())
        .sum();
    assert_eq!(total, n as u64);
    // The suggested regions (the call `grove suggest` makes) come with the layers, as boxes
    // inside the image, and only to a client that has the token.
    for r in l["regions"].as_array().expect("regions listed") {
        let (x, w) = (r["x"].as_u64().unwrap(), r["width"].as_u64().unwrap());
        let (y, h) = (r["y"].as_u64().unwrap(), r["height"].as_u64().unwrap());
        assert!(w > 0 && h > 0 && x + w <= 96 && y + h <= 96, "{r}");
        assert!(r["pixels"].as_u64().unwrap() <= w * h, "{r}");
    }
    assert_eq!(
        http(s.port, "GET", "/api/layers/farm_000", &[], b"").status,
        401
    );
    let wrong = "0".repeat(64);
    assert_eq!(
        http(
            s.port,
            "GET",
            "/api/layers/farm_000",
            &[("X-Grove-Token", &wrong)],
            b""
        )
        .status,
        403
    );
    let png = s.get("/api/layers/farm_000/prediction.png");
    assert_eq!(png.status, 200);
    assert_eq!(&png.body[1..4], b"PNG");
    let st = s.get("/api/state").json();
    assert!(st["model"]["scores"]["caveat"]
        .as_str()
        .unwrap()
        .contains("optimistic"));
    // The page states the smoothing choice in the words of `grove train`.
    assert!(
        status["smoothing"]
            .as_str()
            .unwrap()
            .starts_with("expansion, strength "),
        "{status}"
    );

    // After the model is saved the images are ranked in the background; the ranks are those
    // of `grove suggest MODEL DATA/images` (the command as the reference: same model, same
    // label files, whose pixels are not suggested).
    let t0 = Instant::now();
    let st = loop {
        let st = s.get("/api/state").json();
        if st["train"]["background"].is_null() {
            break st;
        }
        assert!(
            t0.elapsed() < Duration::from_secs(60),
            "ranking did not finish"
        );
        std::thread::sleep(Duration::from_millis(100));
    };
    let out = t.path().join("suggest");
    let json = t.path().join("suggest.json");
    let cli = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(["suggest", data.join("model.grove").to_str().unwrap()])
        .arg(data.join("images"))
        .args(["--top", "100", "--out", out.to_str().unwrap(), "--json"])
        .arg(&json)
        .output()
        .unwrap();
    assert!(
        cli.status.success(),
        "{}",
        String::from_utf8_lossy(&cli.stderr)
    );
    let cli: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    let by_cli: Vec<&str> = cli["images"]
        .as_array()
        .unwrap()
        .iter()
        .map(|i| i["image"].as_str().unwrap())
        .collect();
    let mut by_page: Vec<(u64, &str)> = st["images"]
        .as_array()
        .unwrap()
        .iter()
        .map(|i| {
            (
                i["rank"].as_u64().expect("every image ranked"),
                i["name"].as_str().unwrap(),
            )
        })
        .collect();
    by_page.sort();
    assert_eq!(st["ranked"], 2);
    assert_eq!(by_page.iter().map(|p| p.1).collect::<Vec<_>>(), by_cli);
    assert_eq!(by_page.iter().map(|p| p.0).collect::<Vec<_>>(), vec![1, 2]);
}

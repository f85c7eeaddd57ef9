//! The labelling workspace: a local web server over one dataset folder (`grove label DATA`).
//! It owns no segmentation logic: painting writes ordinary label files through
//! `dataset::save`, training is `TrainConfig::fit`, layers come from `predict_proba` and
//! `eval`. One module per concern:
//!
//! - `http`: the boundary to the HTTP library (requests in, replies out, body limits);
//! - `security`: token, Host / Origin checks, which files may be touched;
//! - `routes`: the security gate and the URL table;
//! - `assets`: the page (HTML/CSS/JS compiled into the binary);
//! - `dataset_api`: images, tiles, labels and the class table;
//! - `tiles`: the image pyramid the page draws from;
//! - `rle`: the run-length coding label maps travel in;
//! - `jobs`: training in the background and the layers computed from the model.

mod assets;
mod dataset_api;
pub mod http;
mod jobs;
pub mod rle;
mod routes;
pub mod security;
mod tiles;

use std::net::{IpAddr, SocketAddr, TcpListener};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

use crate::dataset::{ClassInfo, ClassTable, LabelOptions};
use crate::error::{GroveError, Result};
use security::Token;

/// How to start a workspace.
#[derive(Clone, Debug)]
pub struct ServeOptions {
    pub data: PathBuf,
    /// Model to start from and to write after each training (default `DATA/model.grove`).
    pub model: Option<PathBuf>,
    pub listen: IpAddr,
    /// 0 = any free port.
    pub port: u16,
    pub label_options: LabelOptions,
}

/// Shared state of a running workspace.
pub struct Workspace {
    /// The dataset folder, canonical (every file touched must resolve inside it).
    pub root: PathBuf,
    pub model_path: PathBuf,
    pub label_options: LabelOptions,
    pub token: Token,
    pub port: u16,
    /// The class table as edited in the page. Written to classes.toml once it is a valid
    /// table (two classes or more); until then it lives here.
    pub classes: Mutex<Vec<ClassInfo>>,
    /// Serialises label saves, so the version check and the rename happen as one step.
    pub save_lock: Mutex<()>,
    pub tiles: tiles::PyramidCache,
    pub jobs: jobs::Jobs,
}

impl Workspace {
    /// The class table if it is complete enough to label with.
    pub fn table(&self) -> std::result::Result<ClassTable, String> {
        let classes = self.classes.lock().expect("class lock poisoned").clone();
        ClassTable::new(classes)
    }
}

/// A started server.
pub struct Running {
    pub addr: SocketAddr,
    pub url: String,
    pub workspace: Arc<Workspace>,
    server: Arc<tiny_http::Server>,
    workers: Vec<std::thread::JoinHandle<()>>,
}

/// Requests served at once: the page loads tiles in parallel while a layer is computed.
const WORKERS: usize = 6;

/// Opens the dataset folder, binds the port and starts the request workers.
pub fn start(opts: &ServeOptions) -> Result<Running> {
    let root = opts
        .data
        .canonicalize()
        .map_err(|e| GroveError::io(&opts.data, e))?;
    if !root.join("images").is_dir() {
        return Err(GroveError::input(
            &root,
            "not a grove dataset: expected an images/ folder (labels/ and classes.toml are created by the workspace)",
        ));
    }
    let classes = initial_classes(&root, &opts.label_options)?;
    let model_path = opts
        .model
        .clone()
        .unwrap_or_else(|| root.join("model.grove"));
    // The model is the one file written outside labels/ and classes.toml: never over an
    // image, the class table or a file grove did not write; and checked writable now.
    let mut inputs = crate::dataset::list_images(&root.join("images"))?;
    inputs.push(root.join("classes.toml"));
    crate::output_guard::OutputGuard::new(inputs.iter().map(|p| p.as_path()), false)
        .check_file(&model_path)?;
    let listener = TcpListener::bind((opts.listen, opts.port)).map_err(|e| {
        GroveError::Config(format!(
            "cannot listen on {}:{}: {e}",
            opts.listen, opts.port
        ))
    })?;
    let addr = listener
        .local_addr()
        .map_err(|e| GroveError::Config(e.to_string()))?;
    let server = tiny_http::Server::from_listener(listener, None)
        .map_err(|e| GroveError::Config(format!("cannot start the server: {e}")))?;
    let token = Token::generate();
    let jobs = jobs::Jobs::new(&model_path)?;
    let workspace = Arc::new(Workspace {
        root,
        model_path,
        label_options: opts.label_options,
        token,
        port: addr.port(),
        classes: Mutex::new(classes),
        save_lock: Mutex::new(()),
        tiles: tiles::PyramidCache::default(),
        jobs,
    });
    let host = match addr.ip() {
        IpAddr::V6(ip) => format!("[{ip}]"),
        IpAddr::V4(ip) if ip.is_unspecified() => "127.0.0.1".to_string(),
        IpAddr::V4(ip) => ip.to_string(),
    };
    let url = format!(
        "http://{host}:{}/?token={}",
        addr.port(),
        workspace.token.as_str()
    );
    let server = Arc::new(server);
    let workers = (0..WORKERS)
        .map(|_| {
            let (server, ws) = (server.clone(), workspace.clone());
            std::thread::spawn(move || {
                while let Ok(rq) = server.recv() {
                    routes::handle(&ws, rq);
                }
            })
        })
        .collect();
    Ok(Running {
        addr,
        url,
        workspace,
        server,
        workers,
    })
}

impl Running {
    /// Serves until the process ends.
    pub fn wait(self) {
        for w in self.workers {
            let _ = w.join();
        }
    }

    /// Stops accepting requests and waits for the workers.
    pub fn stop(self) {
        for _ in 0..self.workers.len() {
            self.server.unblock();
        }
        self.wait();
    }
}

/// The class table to start from: classes.toml if there is one (it must be valid: a broken
/// table is the user's file, not ours to replace), else empty.
fn initial_classes(root: &Path, opts: &LabelOptions) -> Result<Vec<ClassInfo>> {
    let path = root.join("classes.toml");
    if !path.exists() {
        return Ok(Vec::new());
    }
    Ok(ClassTable::load(&path, opts.unlabelled_value)?
        .classes()
        .to_vec())
}

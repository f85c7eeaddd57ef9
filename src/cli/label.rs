//! `grove label`: starts the web workspace over a dataset folder and prints its URL.

use std::io::Write;
use std::net::IpAddr;
use std::path::PathBuf;

use clap::Args;

use crate::cli::LabelArgs;
use crate::error::Result;
use crate::serve::{start, ServeOptions};

#[derive(Args, Debug)]
pub struct LabelCmdArgs {
    /// Dataset folder: images/ at least; labels/ and classes.toml are created as you paint.
    pub data: PathBuf,
    /// Model to start from and to write after each training (default DATA/model.grove).
    #[arg(long, short, value_name = "FILE")]
    pub model: Option<PathBuf>,
    /// Port to listen on (default: any free port).
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub port: u16,
    /// Address to listen on. Anything other than loopback lets other machines reach the
    /// workspace (they still need the token): only on a network you trust.
    #[arg(long, default_value = "127.0.0.1", value_name = "ADDR")]
    pub listen: IpAddr,
    /// Open the URL in the default browser.
    #[arg(long)]
    pub open: bool,
    #[command(flatten)]
    pub labels: LabelArgs,
}

pub fn run(args: LabelCmdArgs) -> Result<()> {
    if !args.listen.is_loopback() {
        eprintln!(
            "warning: listening on {}: other machines on this network can reach the workspace (they still need the token); use the default 127.0.0.1 unless you need this",
            args.listen
        );
    }
    let running = start(&ServeOptions {
        data: args.data.clone(),
        model: args.model.clone(),
        listen: args.listen,
        port: args.port,
        label_options: args.labels.options(),
    })?;
    // Write errors are ignored: a closed stdout (`grove label DATA | head -2`) must not stop
    // the server.
    let mut out = std::io::stdout();
    let _ = writeln!(
        out,
        "grove workspace for {}\nopen {}\n(the token in the URL is the password for this session; Ctrl+C stops the server)",
        running.workspace.root.display(),
        running.url
    );
    let _ = out.flush();
    if args.open {
        open_browser(&running.url);
    }
    running.wait();
    Ok(())
}

/// Hands the URL to the desktop's opener; failing to open is not an error (the URL is printed).
fn open_browser(url: &str) {
    let opener = if cfg!(target_os = "macos") {
        "open"
    } else if cfg!(windows) {
        "explorer"
    } else {
        "xdg-open"
    };
    if let Err(e) = std::process::Command::new(opener).arg(url).spawn() {
        eprintln!("warning: could not start {opener} ({e}); open the URL by hand");
    }
}

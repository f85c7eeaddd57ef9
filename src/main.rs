//! The `grove` command; all work happens in the library (see `grove::cli`).

fn main() {
    // Die quietly on a closed pipe (`grove info m.grove | head`) like other Unix tools,
    // instead of Rust's default of ignoring SIGPIPE and panicking on the failed write.
    #[cfg(unix)]
    // SAFETY: setting a signal disposition to the default before any threads start.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
    // Before any thread starts (see `atomic_write`): SIGINT/SIGTERM remove temporaries.
    grove::atomic_write::install_signal_cleanup();
    std::process::exit(grove::cli::run());
}

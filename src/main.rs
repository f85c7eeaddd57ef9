//! The `grove` command; all work happens in the library (see `grove::cli`).

fn main() {
    std::process::exit(grove::cli::run());
}

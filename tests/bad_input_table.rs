//! Runs every row of `docs/bad-inputs.md`: each row's shell command, in a fresh copy of the
//! folder the page describes, must end with the documented exit code and print the documented
//! message, so the page can never drift from what grove does.
//!
//! `GROVE_TABLE_SHOW=1` prints what each row actually printed instead of failing (for writing
//! new rows); `GROVE_TABLE_ROW=N` runs only row N.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

const DOC: &str = include_str!("../docs/bad-inputs.md");

struct Row {
    number: String,
    case: String,
    command: String,
    exit: i32,
    message: String,
}

/// A table cell's code span without its backticks (`` `x` `` or ``` `` x `` ```).
fn code(cell: &str) -> Option<String> {
    let cell = cell.trim();
    let ticks = cell.chars().take_while(|&c| c == '`').count();
    if ticks == 0 || cell.len() < 2 * ticks {
        return None;
    }
    let inner = &cell[ticks..cell.len() - ticks];
    let inner = if ticks > 1 { inner.trim() } else { inner };
    Some(inner.replace("\\|", "|"))
}

/// Splits a Markdown table line into cells, keeping `\|` inside a cell.
fn cells(line: &str) -> Vec<String> {
    let inner = line.trim().trim_start_matches('|').trim_end_matches('|');
    let mut out = vec![String::new()];
    let mut chars = inner.chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '\\' if chars.peek() == Some(&'|') => {
                out.last_mut().unwrap().push_str("\\|");
                chars.next();
            }
            '|' => out.push(String::new()),
            _ => out.last_mut().unwrap().push(c),
        }
    }
    out.iter().map(|c| c.trim().to_string()).collect()
}

fn rows() -> Vec<Row> {
    let mut rows = Vec::new();
    for line in DOC.lines().filter(|l| l.starts_with("| ")) {
        let c = cells(line);
        if c.len() != 5 || c[0].parse::<u32>().is_err() {
            continue;
        }
        let command = code(&c[2]).unwrap_or_else(|| panic!("row {}: command not in `…`", c[0]));
        // A row checked by a named test describes the outcome in words.
        let message = match code(&c[4]) {
            Some(m) => m,
            None if c[4] == "—" || command.starts_with("test ") => String::new(),
            None => panic!("row {}: message not in `…`", c[0]),
        };
        rows.push(Row {
            number: c[0].clone(),
            case: c[1].clone(),
            command,
            exit: c[3]
                .parse()
                .unwrap_or_else(|_| panic!("row {}: exit code {:?}", c[0], c[3])),
            message,
        });
    }
    rows
}

fn grove_bin() -> &'static str {
    env!("CARGO_BIN_EXE_grove")
}

/// The folder every row starts from (see the top of docs/bad-inputs.md).
fn fixture(dir: &Path) {
    let status = Command::new(grove_bin())
        .args(["demo", "--images", "3", "--size", "64", "--out"])
        .arg(dir)
        .stdout(std::process::Stdio::null())
        .status()
        .unwrap();
    assert!(status.success());
    let photo = image::open(dir.join("train/images/farm_000.png"))
        .unwrap()
        .to_rgb8();
    photo.save(dir.join("photo.jpg")).unwrap();
    photo.save(dir.join("photo.tif")).unwrap();
    image::imageops::grayscale(&photo)
        .save(dir.join("grey.png"))
        .unwrap();
    image::GrayImage::new(8, 8)
        .save(dir.join("label-8x8.png"))
        .unwrap();
    let mut colour = image::RgbImage::from_pixel(64, 64, image::Rgb([0x9c, 0x5b, 0x2e]));
    colour.put_pixel(3, 2, image::Rgb([1, 2, 3]));
    colour.save(dir.join("label-colour.png")).unwrap();
    std::fs::write(dir.join("float.tif"), float_tiff(&[0.5; 16])).unwrap();
    let mut values = vec![0.5f32; 48];
    values[3 * 6 + 1] = f32::NAN;
    image::Rgb32FImage::from_raw(4, 4, values)
        .unwrap()
        .save(dir.join("nan.tif"))
        .unwrap();
    std::fs::write(dir.join("huge.png"), png_declaring(100_000, 100_000, 2)).unwrap();
    std::fs::write(
        dir.join("huge-label.png"),
        png_declaring(100_000, 100_000, 0),
    )
    .unwrap();
}

#[path = "support/crafted.rs"]
mod crafted;
use crafted::{float_tiff, png_declaring};

fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let target = to.join(e.file_name());
        if e.file_type().unwrap().is_dir() {
            copy_dir(&e.path(), &target);
        } else {
            std::fs::copy(e.path(), &target).unwrap();
        }
    }
}

/// True when `text` contains the pieces of `message` between its `…` in order.
fn matches(text: &str, message: &str) -> bool {
    let mut rest = text;
    for piece in message.split('…').map(str::trim).filter(|p| !p.is_empty()) {
        match rest.find(piece) {
            Some(i) => rest = &rest[i + piece.len()..],
            None => return false,
        }
    }
    true
}

/// Rows that need a private mount (read-only or full file system) run only where
/// `unshare` may make one (root, or unprivileged user namespaces).
fn can_unshare() -> bool {
    Command::new("unshare")
        .args(["-rm", "true"])
        .status()
        .is_ok_and(|s| s.success())
}

/// What one row's command did, or why it was not run.
enum Outcome {
    Ran { code: i32, output: String },
    Skipped(&'static str),
}

fn run_row(row: &Row, fixture: &Path, scratch: &Path, unshare: bool) -> Outcome {
    if let Some(test) = row.command.strip_prefix("test ") {
        // Not a one-line command: the named test checks it (it must exist).
        let (file, name) = test.split_once("::").expect("test FILE::NAME");
        let source = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join(file))
            .unwrap_or_else(|e| panic!("row {}: {file}: {e}", row.number));
        assert!(
            source.contains(&format!("fn {name}(")),
            "row {}: no test {name} in {file}",
            row.number
        );
        return Outcome::Skipped("checked by that test");
    }
    if row.command.starts_with("unshare ") && !unshare {
        return Outcome::Skipped("unshare cannot make a private mount here");
    }
    let dir = scratch.join(format!("row-{}", row.number));
    copy_dir(fixture, &dir);
    let bin_dir = Path::new(grove_bin()).parent().unwrap();
    let path = format!(
        "{}:{}",
        bin_dir.display(),
        std::env::var("PATH").unwrap_or_default()
    );
    let out = Command::new("sh")
        .arg("-c")
        .arg(&row.command)
        .current_dir(&dir)
        .env("PATH", path)
        .env("RAYON_NUM_THREADS", "1")
        .output()
        .unwrap();
    let output = format!(
        "{}{}",
        String::from_utf8_lossy(&out.stderr),
        String::from_utf8_lossy(&out.stdout)
    );
    let _ = std::fs::remove_dir_all(&dir);
    Outcome::Ran {
        code: out.status.code().unwrap_or(-1),
        output,
    }
}

#[test]
fn every_row_of_the_bad_input_table() {
    let rows = rows();
    assert!(rows.len() >= 30, "only {} rows", rows.len());
    let mut numbers: Vec<&str> = rows.iter().map(|r| r.number.as_str()).collect();
    numbers.dedup();
    assert_eq!(numbers.len(), rows.len(), "row numbers repeat");
    let only = std::env::var("GROVE_TABLE_ROW").ok();
    let show = std::env::var_os("GROVE_TABLE_SHOW").is_some();
    let t = tempfile::tempdir().unwrap();
    let fixture_dir: PathBuf = t.path().join("fixture");
    fixture(&fixture_dir);
    let unshare = can_unshare();
    let next = AtomicUsize::new(0);
    let failures = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..2 {
            s.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::SeqCst);
                let Some(row) = rows.get(i) else { break };
                if only.as_deref().is_some_and(|n| n != row.number) {
                    continue;
                }
                match run_row(row, &fixture_dir, t.path(), unshare) {
                    Outcome::Skipped(why) => {
                        eprintln!("row {} ({}): not run: {why}", row.number, row.case)
                    }
                    Outcome::Ran { code, output } => {
                        if show {
                            eprintln!("row {} exit {code}: {}", row.number, output.trim_end());
                            continue;
                        }
                        let panicked = output.contains("panicked") || code == 101;
                        if code != row.exit || !matches(&output, &row.message) || panicked {
                            failures.lock().unwrap().push(format!(
                                "row {} ({}): `{}`\n  expected exit {} and {:?}\n  got exit {code}: {}",
                                row.number, row.case, row.command, row.exit, row.message, output.trim_end()
                            ));
                        }
                    }
                }
            });
        }
    });
    let failures = failures.into_inner().unwrap();
    assert!(failures.is_empty(), "\n{}", failures.join("\n"));
}

#[test]
fn message_matching_follows_the_ellipses() {
    assert!(matches("error: a.png: cut short at 3", "a.png: … at 3"));
    assert!(!matches("error: at 3 a.png", "a.png: … at 3"));
    assert!(matches("anything", ""));
    assert_eq!(code("`` a `b` ``").unwrap(), "a `b`");
    assert_eq!(cells("| 1 | x `a \\| b` | y |")[1], "x `a \\| b`");
}

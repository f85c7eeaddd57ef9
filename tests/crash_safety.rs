//! Crash safety of a batch `apply`, through the built binary as a child process: killed with
//! SIGKILL at random moments and re-run, the job finishes with every output byte-identical to
//! an uninterrupted run and no temporary file left; SIGTERM removes the temporaries at once.

#![cfg(unix)]

use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::Instant;

use rand::{Rng, SeedableRng};

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// A small model and a batch of 12 demo scenes to apply it to.
fn setup(root: &Path) -> (PathBuf, PathBuf) {
    let train = root.join("train");
    grove::demo::write_demo_dataset(&train, 0..2, 96, 3).unwrap();
    let ds = grove::dataset::Dataset::open(&train, Default::default()).unwrap();
    let mut cfg = grove::segmenter::TrainConfig::default();
    cfg.forest.n_trees = 6;
    cfg.features.textons = 8;
    let model = cfg.fit(&ds, &ds.labelled(), Default::default()).unwrap();
    let model_path = root.join("m.grove");
    grove::model::save(&model, &model_path).unwrap();
    let batch = root.join("batch");
    grove::demo::write_demo_dataset(&batch, 10..22, 128, 4).unwrap();
    (model_path, batch.join("images"))
}

fn apply(model: &Path, images: &Path, out: &Path) -> Child {
    Command::new(env!("CARGO_BIN_EXE_grove"))
        .args([
            "--threads",
            "2",
            "apply",
            s(model),
            s(images),
            "--out",
            s(out),
            "--confidence",
            "--probabilities",
        ])
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap()
}

/// Relative path → bytes of every file under `dir`.
fn files(dir: &Path) -> Vec<(PathBuf, Vec<u8>)> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.push((
                    p.strip_prefix(dir).unwrap().to_path_buf(),
                    std::fs::read(&p).unwrap(),
                ));
            }
        }
    }
    out.sort();
    out
}

fn temporaries(dir: &Path) -> Vec<PathBuf> {
    files(dir)
        .into_iter()
        .map(|(p, _)| p)
        .filter(|p| {
            p.file_name()
                .unwrap()
                .to_string_lossy()
                .starts_with(".grove-tmp-")
        })
        .collect()
}

#[test]
fn killed_batch_apply_resumes_to_identical_outputs() {
    let t = tempfile::tempdir().unwrap();
    let (model, images) = setup(t.path());
    let reference = t.path().join("reference");
    let t0 = Instant::now();
    let status = apply(&model, &images, &reference).wait().unwrap();
    let full = t0.elapsed();
    assert!(status.success());
    let expected = files(&reference);
    let n_classes = grove::model::load(&model).unwrap().classes.len();
    // At least these; the batch driver may add its own records beside them.
    assert!(
        expected.len() >= 12 * (3 + n_classes) + 3,
        "label map, overlay, confidence and one probability map per class for each image; areas.csv/json and the class table"
    );

    let out = t.path().join("out");
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(8);
    let mut killed_mid_run = 0;
    for _ in 0..6 {
        let mut child = apply(&model, &images, &out);
        let wait = full.mul_f64(rng.gen_range(0.05..1.0));
        std::thread::sleep(wait);
        if child.try_wait().unwrap().is_none() {
            killed_mid_run += 1;
        }
        child.kill().unwrap(); // SIGKILL
        child.wait().unwrap();
    }
    // Runs resume (complete outputs are skipped), so later runs may finish before their kill.
    assert!(killed_mid_run >= 1, "no kill landed mid-run");
    eprintln!(
        "{killed_mid_run} kills mid-run left {} temporaries and {} files",
        temporaries(&out).len(),
        files(&out).len()
    );
    let rerun = apply(&model, &images, &out).wait_with_output().unwrap();
    assert!(
        rerun.status.success(),
        "re-run failed: {}",
        String::from_utf8_lossy(&rerun.stderr)
    );
    assert_eq!(temporaries(&out), Vec::<PathBuf>::new(), "temporaries left");
    // Resume records hold timings; the deliverables are what must be identical.
    let deliverable = |v: Vec<(PathBuf, Vec<u8>)>| -> Vec<(PathBuf, Vec<u8>)> {
        v.into_iter()
            .filter(|(p, _)| !p.starts_with(grove::batch::record::RECORD_DIR))
            .collect()
    };
    let expected = deliverable(expected);
    let got = deliverable(files(&out));
    let names = |v: &[(PathBuf, Vec<u8>)]| v.iter().map(|(p, _)| p.clone()).collect::<Vec<_>>();
    assert_eq!(names(&got), names(&expected));
    for ((p, a), (_, b)) in got.iter().zip(&expected) {
        assert!(a == b, "{} differs from the uninterrupted run", p.display());
    }
}

#[test]
fn sigterm_removes_temporaries_in_flight() {
    let t = tempfile::tempdir().unwrap();
    let (model, images) = setup(t.path());
    let reference = t.path().join("reference");
    let t0 = Instant::now();
    assert!(apply(&model, &images, &reference).wait().unwrap().success());
    let full = t0.elapsed();
    for (i, f) in [0.3, 0.5, 0.7, 0.9].iter().enumerate() {
        let out = t.path().join(format!("out{i}"));
        let child = apply(&model, &images, &out);
        std::thread::sleep(full.mul_f64(*f));
        // SAFETY: sending a signal to our own child process.
        unsafe {
            libc::kill(child.id() as libc::pid_t, libc::SIGTERM);
        }
        let output = child.wait_with_output().unwrap();
        if output.status.success() {
            continue; // finished before the signal
        }
        use std::os::unix::process::ExitStatusExt;
        assert_eq!(output.status.signal(), Some(libc::SIGTERM));
        if out.exists() {
            assert_eq!(temporaries(&out), Vec::<PathBuf>::new(), "after SIGTERM");
        }
    }
}

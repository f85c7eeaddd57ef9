//! Batch `apply`: shards partition the input exactly, sharded runs make the same outputs as
//! one unsharded run, and re-runs resume (skip complete outputs of the same model).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use grove::batch::{shard_of, Shard};
use grove::dataset::{Dataset, LabelOptions};
use grove::progress::Progress;
use grove::segmenter::TrainConfig;

fn grove(args: &[&str]) -> String {
    let out = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "grove {args:?} failed:\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// Every name lands in exactly one shard for each N, the shards' union is the input, and
/// the assignment does not depend on the order or the folder the names come in.
#[test]
fn shards_partition_the_input_exactly() {
    let names: Vec<PathBuf> = (0..500)
        .map(|i| PathBuf::from(format!("flight/frame_{i:05}.tif")))
        .collect();
    let mut reordered: Vec<PathBuf> = names
        .iter()
        .rev()
        .map(|p| Path::new("/elsewhere").join(p.file_name().unwrap()))
        .collect();
    reordered.rotate_left(123);
    for n in [1, 2, 3, 4, 7, 16, 100] {
        let mut hits = vec![0usize; names.len()];
        let mut sizes = Vec::new();
        for k in 0..n {
            let shard = Shard::new(k, n).unwrap();
            let mine = shard.select(names.clone());
            sizes.push(mine.len());
            for p in &mine {
                let i = names.iter().position(|q| q == p).unwrap();
                hits[i] += 1;
            }
            let stems = |v: Vec<PathBuf>| -> Vec<String> {
                let mut s: Vec<String> = v
                    .iter()
                    .map(|p| p.file_stem().unwrap().to_string_lossy().into_owned())
                    .collect();
                s.sort();
                s
            };
            assert_eq!(stems(mine), stems(shard.select(reordered.clone())));
        }
        assert!(hits.iter().all(|&h| h == 1), "N = {n}: {hits:?}");
        // Balance is statistical only (a shard's size is binomial), but with ≥ 30 names per
        // shard none should fall below 60 % of the mean.
        let mean = names.len() / n;
        if mean >= 30 {
            assert!(
                sizes.iter().all(|&s| s * 5 >= mean * 3),
                "N = {n}: {sizes:?}"
            );
        }
    }
    assert_eq!(shard_of("frame_00001", 1), 0);
}

fn train_small(root: &Path) -> PathBuf {
    grove::demo::write_demo_dataset(&root.join("train"), 0..2, 96, 3).unwrap();
    let ds = Dataset::open(&root.join("train"), LabelOptions::default()).unwrap();
    let mut cfg = TrainConfig::default();
    cfg.features.textons = 4;
    cfg.features.bank.scales = vec![1.0, 2.0];
    cfg.forest.n_trees = 4;
    cfg.samples_per_image = 500;
    let model = cfg.fit(&ds, &ds.labelled(), Progress::default()).unwrap();
    let path = root.join("m.grove");
    grove::model::save(&model, &path).unwrap();
    path
}

fn files(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| {
            let p = e.unwrap().path();
            let name = p.file_name().unwrap().to_string_lossy().into_owned();
            (name, std::fs::read(&p).unwrap())
        })
        .collect()
}

fn statuses(log: &str) -> Vec<String> {
    log.lines()
        .map(|l| {
            let v: serde_json::Value = serde_json::from_str(l).unwrap();
            v["status"].as_str().unwrap().to_string()
        })
        .collect()
}

#[test]
fn sharded_runs_equal_one_run_and_resume() {
    let t = tempfile::tempdir().unwrap();
    let root = t.path();
    let model = train_small(root);
    grove::demo::write_demo_dataset(&root.join("scenes"), 10..17, 72, 3).unwrap();
    std::fs::write(root.join("list.txt"), "scenes/images/*.png\n").unwrap();
    let s = |p: &Path| p.to_str().unwrap().to_string();
    let list = format!("@{}", s(&root.join("list.txt")));
    let whole = root.join("whole");
    grove(&[
        "apply",
        &s(&model),
        &list,
        "--out",
        &s(&whole),
        "--threads",
        "1",
    ]);

    // Three shards, each into its own folder as the README's job scripts do.
    let sharded = root.join("sharded");
    let mut done = 0;
    let mut shard_labels = BTreeMap::new();
    let mut shard_overlays = BTreeMap::new();
    for k in 0..3 {
        let out = sharded.join(format!("shard-{k}-of-3"));
        let log = grove(&[
            "apply",
            &s(&model),
            &s(&root.join("scenes")),
            "--out",
            &s(&out),
            "--shard",
            &format!("{k}/3"),
            "--log-json",
            "--threads",
            "1",
        ]);
        for line in log.lines() {
            let v: serde_json::Value = serde_json::from_str(line).unwrap();
            assert_eq!(v["shard"], format!("{k}/3"));
            assert_eq!(v["pixels"], 72 * 72);
            assert!(v["outputs"].as_array().unwrap().len() == 2, "{line}");
        }
        done += statuses(&log).len();
        let n = shard_labels.len();
        shard_labels.extend(files(&out.join("labels")));
        shard_overlays.extend(files(&out.join("overlays")));
        assert_eq!(
            shard_labels.len(),
            n + statuses(&log).len(),
            "disjoint shards"
        );
    }
    assert_eq!(done, 7);
    let labels = files(&whole.join("labels"));
    assert_eq!(labels.len(), 7);
    assert_eq!(labels, shard_labels);
    assert_eq!(files(&whole.join("overlays")), shard_overlays);
    // merge-areas over the shard folders gives the unsharded table (rows in another order).
    let merged = root.join("merged.csv");
    let pattern: Vec<String> = (0..3)
        .map(|k| s(&sharded.join(format!("shard-{k}-of-3"))))
        .collect();
    let mut cmd = vec!["merge-areas"];
    cmd.extend(pattern.iter().map(String::as_str));
    let merged_arg = s(&merged);
    cmd.extend(["--out", &merged_arg]);
    grove(&cmd);
    let sorted = |p: &Path| {
        let text = std::fs::read_to_string(p).unwrap();
        let mut rows: Vec<String> = text.lines().map(str::to_string).collect();
        rows.sort();
        rows
    };
    assert_eq!(sorted(&merged), sorted(&whole.join("areas.csv")));

    // Re-run: everything complete and made by this model → skipped.
    let args = |extra: &[&str]| -> Vec<String> {
        let mut v: Vec<String> = [
            "apply",
            &s(&model),
            &list,
            "--out",
            &s(&whole),
            "--log-json",
        ]
        .iter()
        .map(|a| a.to_string())
        .collect();
        v.extend(extra.iter().map(|a| a.to_string()));
        v
    };
    let run = |extra: &[&str]| {
        let a = args(extra);
        statuses(&grove(&a.iter().map(String::as_str).collect::<Vec<_>>()))
    };
    let areas = std::fs::read(whole.join("areas.csv")).unwrap();
    assert!(run(&[]).iter().all(|s| s == "skipped"));
    // The resumed run rebuilds the same area table from its records.
    assert_eq!(std::fs::read(whole.join("areas.csv")).unwrap(), areas);
    // A deleted output, or different settings, redo what they touch.
    let first = whole.join("labels").join(labels.keys().next().unwrap());
    std::fs::remove_file(&first).unwrap();
    let st = run(&[]);
    assert_eq!(st.iter().filter(|s| *s == "done").count(), 1, "{st:?}");
    assert!(run(&["--confidence"]).iter().all(|s| s == "done"));
    assert!(run(&["--confidence", "--force"])
        .iter()
        .all(|s| s == "done"));
    // Another model (same settings, other seed) → redone.
    let mut bytes = std::fs::read(&model).unwrap();
    let other = root.join("other.grove");
    let m = grove::model::from_bytes(&bytes).unwrap();
    let mut m2 = m.clone();
    m2.provenance.seed += 1;
    bytes = grove::model::to_bytes(&m2);
    std::fs::write(&other, bytes).unwrap();
    let st = statuses(&grove(&[
        "apply",
        &s(&other),
        &list,
        "--out",
        &s(&whole),
        "--log-json",
        "--confidence",
    ]));
    assert!(st.iter().all(|s| s == "done"), "{st:?}");
    assert_eq!(files(&whole.join("labels")), labels);
}

//! Defaults that keep scores honest: position features are opt-in and `train` says when they
//! dominate; the out-of-bag figure comes with its caveat.

use std::path::Path;
use std::process::Command;

const TABLE: &str = "[[class]]\nid = 0\nname = \"left\"\ncolor = \"#8a6a4a\"\n\n[[class]]\nid = 1\nname = \"right\"\ncolor = \"#2f9e44\"\n";

/// (exit code, stdout, stderr)
fn grove(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_grove"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

/// Images of the same noise everywhere, labelled by which half a pixel is in: only position
/// can tell the classes apart, so with `--position` it must top the ranking.
fn where_only_dataset(dir: &Path) {
    std::fs::create_dir_all(dir.join("images")).unwrap();
    std::fs::create_dir_all(dir.join("labels")).unwrap();
    std::fs::write(dir.join("classes.toml"), TABLE).unwrap();
    for n in 0..2u32 {
        let img = image::GrayImage::from_fn(48, 48, |x, y| {
            let h = (x.wrapping_mul(73_856_093) ^ y.wrapping_mul(19_349_663) ^ (n * 83_492_791))
                .wrapping_mul(2_654_435_761);
            image::Luma([(h >> 24) as u8])
        });
        img.save(dir.join(format!("images/n{n}.png"))).unwrap();
        let lab = image::GrayImage::from_fn(48, 48, |x, _| image::Luma([(x >= 24) as u8]));
        lab.save(dir.join(format!("labels/n{n}.png"))).unwrap();
    }
}

#[test]
fn position_is_opt_in_and_train_warns_when_it_dominates() {
    let t = tempfile::tempdir().unwrap();
    let data = t.path().join("data");
    where_only_dataset(&data);
    let model = t.path().join("m.grove");
    let (d, m) = (data.to_str().unwrap(), model.to_str().unwrap());
    let common = [
        "train",
        d,
        "--model",
        m,
        "--trees",
        "4",
        "--textons",
        "0",
        "--scales",
        "1",
    ];

    let (code, out, err) = grove(&common);
    assert_eq!(code, 0, "{err}");
    assert!(!err.contains("position feature"), "{err}");
    assert!(
        out.contains("out-of-bag accuracy") && out.contains("optimistic"),
        "{out}"
    );
    let (_, info, _) = grove(&["info", m, "--top", "100"]);
    assert!(
        info.contains("position off") && !info.contains("pos_x"),
        "{info}"
    );

    let mut with = common.to_vec();
    with.push("--position");
    let (code, _, err) = grove(&with);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("warning: a position feature is the number 1 feature"),
        "{err}"
    );
    let (_, info, _) = grove(&["info", m]);
    assert!(
        info.contains("position on") && info.contains("pos_x"),
        "{info}"
    );
}

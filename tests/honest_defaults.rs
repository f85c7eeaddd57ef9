//! Defaults that keep scores honest: position features are opt-in and `train` says when they
//! dominate; the out-of-bag figure comes with its caveat.

use std::path::Path;

const TABLE: &str = "[[class]]\nid = 0\nname = \"left\"\ncolor = \"#8a6a4a\"\n\n[[class]]\nid = 1\nname = \"right\"\ncolor = \"#2f9e44\"\n";

#[path = "support/run.rs"]
mod run;
use run::grove;

/// Images of the same noise everywhere, labelled by which half a pixel is in: only position
/// can tell the classes apart, so with `--position` it must top the ranking.
fn where_only_dataset(dir: &Path) {
    std::fs::create_dir_all(dir.join("images")).unwrap();
    std::fs::create_dir_all(dir.join("labels")).unwrap();
    std::fs::write(dir.join("classes.toml"), TABLE).unwrap();
    for n in 0..2u32 {
        noise_image(n, 48, 48)
            .save(dir.join(format!("images/n{n}.png")))
            .unwrap();
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

fn noise_image(n: u32, w: u32, h: u32) -> image::GrayImage {
    image::GrayImage::from_fn(w, h, |x, y| {
        let v = (x.wrapping_mul(73_856_093) ^ y.wrapping_mul(19_349_663) ^ (n * 83_492_791))
            .wrapping_mul(2_654_435_761);
        image::Luma([(v >> 24) as u8])
    })
}

/// `apply` names an image far from the training images (size and feature means, see
/// `eval::drift`), and says nothing for one like them.
#[test]
fn apply_warns_about_images_unlike_the_training_images() {
    let t = tempfile::tempdir().unwrap();
    let data = t.path().join("data");
    where_only_dataset(&data);
    let model = t.path().join("m.grove");
    let m = model.to_str().unwrap();
    let (code, _, err) = grove(&[
        "train",
        data.to_str().unwrap(),
        "--model",
        m,
        "--trees",
        "4",
        "--textons",
        "0",
        "--scales",
        "1",
        "--smooth",
        "none",
    ]);
    assert_eq!(code, 0, "{err}");
    let like = t.path().join("like.png");
    noise_image(7, 48, 48).save(&like).unwrap();
    // Four times the size, and smooth where the training images are noise.
    let unlike = t.path().join("unlike.png");
    image::GrayImage::from_fn(200, 200, |x, _| image::Luma([(x + 20) as u8]))
        .save(&unlike)
        .unwrap();
    let out = t.path().join("out");
    let (code, _, err) = grove(&[
        "apply",
        m,
        like.to_str().unwrap(),
        unlike.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(!err.contains("/like.png is unlike"), "{err}");
    let line = err
        .lines()
        .find(|l| l.contains("unlike.png is unlike the training images"))
        .unwrap_or_else(|| panic!("no warning for unlike.png: {err}"));
    assert!(line.contains("200x200") && line.contains("48x48"), "{line}");
    assert!(line.contains("feature means are more than"), "{line}");
}

/// `--no-tint CLASS` leaves that class's pixels as the image shows them; an unknown class
/// is a usage error listing the model's classes.
#[test]
fn no_tint_leaves_a_class_as_the_image() {
    let t = tempfile::tempdir().unwrap();
    let data = t.path().join("data");
    where_only_dataset(&data);
    let model = t.path().join("m.grove");
    let m = model.to_str().unwrap();
    let (code, _, err) = grove(&[
        "train",
        data.to_str().unwrap(),
        "--model",
        m,
        "--trees",
        "4",
        "--textons",
        "0",
        "--scales",
        "1",
        "--position",
        "--smooth",
        "none",
    ]);
    assert_eq!(code, 0, "{err}");
    let img = data.join("images/n0.png");
    let out = t.path().join("out");
    let o = out.to_str().unwrap();
    let (code, _, err) = grove(&[
        "apply",
        m,
        img.to_str().unwrap(),
        "--out",
        o,
        "--no-tint",
        "left",
    ]);
    assert_eq!(code, 0, "{err}");
    let overlay = image::open(out.join("overlays/n0.png")).unwrap().to_rgb8();
    // The label PNG is palette-coded with the class colours: "left" is #8a6a4a.
    let labels = image::open(out.join("labels/n0.png")).unwrap().to_rgb8();
    let photo = image::open(&img).unwrap().to_luma8();
    let (mut left, mut right) = (0, 0);
    for ((o, l), p) in overlay.pixels().zip(labels.pixels()).zip(photo.pixels()) {
        if l.0 == [0x8a, 0x6a, 0x4a] {
            assert_eq!(o.0, [p[0]; 3], "an untinted pixel shows the image");
            left += 1;
        } else if o.0 != [p[0]; 3] {
            right += 1;
        }
    }
    assert!(left > 0 && right > 0, "{left} untinted, {right} tinted");
    let (code, _, err) = grove(&[
        "apply",
        m,
        img.to_str().unwrap(),
        "--out",
        o,
        "--no-tint",
        "nope",
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("--no-tint \"nope\"") && err.contains("left, right"),
        "{err}"
    );
}

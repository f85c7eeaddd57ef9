//! TIFF in and out, and `.npy` probabilities, checked against outside tools
//! (tests/fixtures/tiff_npy, made and checked by `make_tiff_npy_fixture.py` with tifffile
//! and numpy; versions in `versions.txt`):
//! * the TIFF inputs tifffile wrote (8-bit strips; 16-bit tiles as BigTIFF; big-endian
//!   16-bit Deflate tiles; LZW with predictor in strips and tiles; PackBits) read as the
//!   values the script put in, whole and by the streaming reader;
//! * the TIFF maps and the `.npy` grove writes are byte for byte the files tifffile and numpy
//!   read back there (right pixels, palette, tiles, BigTIFF, the input's resolution and
//!   GeoTIFF tags; numpy.load's array, and numpy.save's very bytes);
//! * `grove apply --map-format tiff --probabilities npy` writes the same files streamed and
//!   whole, carries each input's tags onto its maps (compared with the `tiff` crate's tag
//!   reader), and its arrays agree with its label maps;
//! * bad TIFFs fail with the file's name and leave no output; a `.npy` grove recorded is
//!   replaced, another one is not.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use grove::dataset::{Dataset, LabelOptions};
use grove::imageio::npy::NpyWriter;
use grove::imageio::stream::{open_streamable, BandReader};
use grove::imageio::tiff_tags::{find_entry, read_pass_through_tags};
use grove::imageio::{read_image, read_label_file, LabelPixels};
use grove::outputs::stream::{open_sink, MapKind, MapStyle};
use grove::outputs::MapFormat;
use grove::progress::Progress;
use grove::segmenter::TrainConfig;

fn fixture(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures/tiff_npy")
        .join(rel)
}

/// Sample formulas of `make_tiff_npy_fixture.py` (`rgb8`, `grey16`).
fn rgb8(x: usize, y: usize) -> [u16; 3] {
    [
        (x * 4 % 256) as u16,
        (y * 5 % 256) as u16,
        ((x + y) * 3 % 256) as u16,
    ]
}
fn grey16(x: usize, y: usize) -> u16 {
    ((x * 997 + y * 131) % 65536) as u16
}

#[test]
fn tifffile_inputs_read_as_written() {
    // Samples come as [0, 1]; scaled back to the file's integers (`scale` = 255 or 65535).
    let check = |name: &str, scale: f32, expect: &dyn Fn(usize, usize) -> Vec<u16>| {
        let img = read_image(&fixture(&format!("inputs/{name}"))).unwrap();
        for y in 0..img.height {
            for x in 0..img.width {
                let got: Vec<u16> = img
                    .channels
                    .iter()
                    .map(|p| (p.data[y * img.width + x] * scale).round() as u16)
                    .collect();
                assert_eq!(got, expect(x, y), "{name} at ({x}, {y})");
            }
        }
        (img.width, img.height)
    };
    assert_eq!(
        check("geo_rgb8_strips.tif", 255.0, &|x, y| rgb8(x, y).to_vec()),
        (61, 47)
    );
    assert_eq!(
        check("grey16_tiles_big.tif", 65535.0, &|x, y| vec![grey16(x, y)]),
        (70, 53)
    );
    let be = |x, y| vec![grey16(x, y), grey16(y, x), 65535 - grey16(x, y)];
    assert_eq!(check("geo_rgb16_be_tiles.tif", 65535.0, &be), (50, 45));
    // LZW with the horizontal predictor (strips, tiles; 8- and 16-bit) and PackBits.
    assert_eq!(
        check("lzw_pred_rgb8_strips.tif", 255.0, &|x, y| rgb8(x, y)
            .to_vec()),
        (61, 47)
    );
    assert_eq!(
        check("lzw_pred_grey16_tiles.tif", 65535.0, &|x, y| vec![grey16(
            x, y
        )]),
        (70, 53)
    );
    assert_eq!(
        check("lzw_grey8_tiles.tif", 255.0, &|x, y| vec![
            grey16(x, y) >> 8
        ]),
        (70, 53)
    );
    assert_eq!(
        check("packbits_grey8_strips.tif", 255.0, &|x, y| vec![
            grey16(x, y) >> 8
        ]),
        (70, 53)
    );
}

/// The streaming reader (which `apply` uses above its size threshold) gives the whole-file
/// reader's samples for every compression and layout of the fixture, in bands that do not
/// line up with the strips or tiles.
#[test]
fn tifffile_inputs_stream_as_read_whole() {
    for name in [
        "geo_rgb8_strips.tif",
        "grey16_tiles_big.tif",
        "geo_rgb16_be_tiles.tif",
        "lzw_pred_rgb8_strips.tif",
        "lzw_pred_grey16_tiles.tif",
        "lzw_grey8_tiles.tif",
        "packbits_grey8_strips.tif",
    ] {
        let path = fixture(&format!("inputs/{name}"));
        let whole = read_image(&path).unwrap();
        let source = open_streamable(&path)
            .unwrap()
            .unwrap_or_else(|| panic!("{name} streams"));
        let mut bands = BandReader::new(source);
        let w = whole.width;
        let mut y0 = 0;
        while y0 < whole.height {
            let rows = 11.min(whole.height - y0);
            let band = bands.rows(y0, rows).unwrap();
            for (c, plane) in band.channels.iter().enumerate() {
                assert_eq!(
                    plane.data[..],
                    whole.channels[c].data[y0 * w..(y0 + rows) * w],
                    "{name}: rows {y0}..{} channel {c}",
                    y0 + rows
                );
            }
            y0 += rows;
        }
    }
}

/// The files `make_tiff_npy_fixture.py check` verified, written again by grove's writers.
fn write_checked_files(dir: &Path) {
    let geo = read_pass_through_tags(&fixture("inputs/geo_rgb8_strips.tif")).unwrap();
    let big = read_pass_through_tags(&fixture("inputs/grey16_tiles_big.tif")).unwrap();
    let palette: Vec<u8> = (0..256usize)
        .flat_map(|i| {
            [
                (i * 50 % 256) as u8,
                (i * 90 % 256) as u8,
                (i * 130 % 256) as u8,
            ]
        })
        .collect();
    let style = |tags, flavour| MapStyle {
        format: MapFormat::Tiff,
        tags,
        flavour,
    };
    use grove::imageio::tiff_out::TiffFlavour;
    let (w, h) = (61, 47);
    let ids: Vec<u8> = (0..w * h)
        .map(|i| ((i % w / 7 + i / w / 5) % 5) as u8)
        .collect();
    let s = style(&geo, TiffFlavour::Auto);
    let mut labels = open_sink(
        &dir.join("labels_geo.tif"),
        w,
        h,
        MapKind::Labels(palette),
        &s,
    )
    .unwrap();
    // In uneven pieces, as a streamed apply delivers them.
    labels.write_rows(&ids[..10 * w]).unwrap();
    labels.write_rows(&ids[10 * w..]).unwrap();
    labels.finish().unwrap();
    let (w, h) = (300, 270);
    let rgb: Vec<u8> = (0..w * h)
        .flat_map(|i| {
            let (x, y) = (i % w, i / w);
            [(x / 16 * 20 % 256) as u8, (y / 16 * 30 % 256) as u8, 77]
        })
        .collect();
    let s = style(&big, TiffFlavour::Big);
    let mut overlay = open_sink(&dir.join("overlay_big.tif"), w, h, MapKind::Rgb, &s).unwrap();
    for band in rgb.chunks(100 * w * 3) {
        overlay.write_rows(band).unwrap();
    }
    overlay.finish().unwrap();
    let values: Vec<f32> = (0..47 * 61 * 3).map(|i| (i % 4096) as f32 * 0.25).collect();
    let mut npy = NpyWriter::create(&dir.join("probabilities.npy"), &[47, 61, 3]).unwrap();
    npy.write(&values[..61 * 3 * 5]).unwrap();
    npy.write(&values[61 * 3 * 5..]).unwrap();
    npy.finish().unwrap();
}

#[test]
fn written_maps_and_arrays_are_the_ones_tifffile_and_numpy_read() {
    let names = ["labels_geo.tif", "overlay_big.tif", "probabilities.npy"];
    if std::env::var_os("GROVE_WRITE_FIXTURE").is_some() {
        std::fs::create_dir_all(fixture("written")).unwrap();
        write_checked_files(&fixture("written"));
        return;
    }
    let t = tempfile::tempdir().unwrap();
    write_checked_files(t.path());
    for name in names {
        let ours = std::fs::read(t.path().join(name)).unwrap();
        let checked = std::fs::read(fixture(&format!("written/{name}"))).unwrap();
        assert!(
            ours == checked,
            "{name} is no longer the file tifffile/numpy read (written.json)"
        );
    }
    // And grove reads its own palette label map back as class ids (to correct and retrain).
    match read_label_file(&t.path().join("labels_geo.tif"))
        .unwrap()
        .pixels
    {
        LabelPixels::Values(v) => assert_eq!(v[7], 1),
        LabelPixels::Colours(_) => panic!("a palette TIFF read as colours"),
    }
}

fn grove_bin(above: usize, args: &[&str]) -> std::process::Output {
    Command::new(env!("CARGO_BIN_EXE_grove"))
        .env("GROVE_STREAM_ABOVE_PIXELS", above.to_string())
        .args(args)
        .output()
        .unwrap()
}

fn train_small(root: &Path) -> PathBuf {
    grove::demo::write_demo_dataset(&root.join("train"), 0..1, 64, 3).unwrap();
    let ds = Dataset::open(&root.join("train"), LabelOptions::default()).unwrap();
    let mut cfg = TrainConfig::default();
    cfg.features.textons = 4;
    cfg.features.bank.scales = vec![1.0, 2.0];
    cfg.forest.n_trees = 4;
    cfg.samples_per_image = 300;
    let model = cfg.fit(&ds, &ds.labelled(), Progress::default()).unwrap();
    let path = root.join("m.grove");
    grove::model::save(&model, &path).unwrap();
    path
}

/// Every file under `dir` but the resume records, by relative path.
fn files(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut out = BTreeMap::new();
    let mut todo = vec![dir.to_path_buf()];
    while let Some(d) = todo.pop() {
        for e in std::fs::read_dir(d).unwrap() {
            let p = e.unwrap().path();
            let rel = p.strip_prefix(dir).unwrap().display().to_string();
            if p.is_dir() {
                todo.push(p);
            } else if !rel.starts_with("done/") {
                out.insert(rel, std::fs::read(&p).unwrap());
            }
        }
    }
    out
}

/// Tag `code` of a TIFF as the `tiff` crate reads it (an outside reader).
fn tag(path: &Path, code: u16) -> Option<String> {
    let mut d = tiff::decoder::Decoder::new(std::fs::File::open(path).unwrap()).unwrap();
    d.find_tag(tiff::tags::Tag::from_u16_exhaustive(code))
        .unwrap()
        .map(|v| format!("{v:?}"))
}

/// A `.npy` file's shape (from its header) and float32 values.
fn read_npy(path: &Path) -> (String, Vec<f32>) {
    let b = std::fs::read(path).unwrap();
    assert_eq!(&b[..8], b"\x93NUMPY\x01\x00");
    let len = u16::from_le_bytes([b[8], b[9]]) as usize;
    let header = String::from_utf8(b[10..10 + len].to_vec()).unwrap();
    assert!(header.contains("'descr': '<f4'"), "{header}");
    let shape = header.split("'shape': ").nth(1).unwrap();
    let shape = shape[..shape.find(')').unwrap() + 1].to_string();
    let values = b[10 + len..]
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes(c.try_into().unwrap()))
        .collect();
    (shape, values)
}

#[test]
fn apply_writes_tagged_tiff_maps_and_npy_the_same_streamed_and_whole() {
    let t = tempfile::tempdir().unwrap();
    let model = train_small(t.path());
    let images = t.path().join("in");
    std::fs::create_dir_all(&images).unwrap();
    let inputs = [
        ("geo_rgb8_strips", (61, 47)),
        ("grey16_tiles_big", (70, 53)),
        ("geo_rgb16_be_tiles", (50, 45)),
    ];
    for (name, _) in inputs {
        let file = format!("{name}.tif");
        std::fs::copy(fixture(&format!("inputs/{file}")), images.join(&file)).unwrap();
    }
    let run = |above: usize, out: &Path| {
        let o = grove_bin(
            above,
            &[
                "apply",
                model.to_str().unwrap(),
                images.to_str().unwrap(),
                "--out",
                out.to_str().unwrap(),
                "--tile",
                "24",
                "--smooth",
                "none",
                "--map-format",
                "tiff",
                "--confidence",
                "--uncertainty",
                "--probabilities",
                "npy",
                "--log-json",
            ],
        );
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(o.status.success(), "{err}");
        // Which path each image took.
        String::from_utf8_lossy(&o.stdout)
            .lines()
            .map(|l| l.contains("\"streamed\":true"))
            .collect::<Vec<_>>()
    };
    let (whole, streamed) = (t.path().join("whole"), t.path().join("streamed"));
    assert_eq!(run(usize::MAX, &whole), [false; 3]);
    assert_eq!(run(0, &streamed), [true; 3]);
    let (a, b) = (files(&whole), files(&streamed));
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    // 3 images × (labels, overlay, confidence, 2 uncertainty, npy) + classes.toml +
    // areas.csv/json.
    assert_eq!(a.len(), 3 * 6 + 3, "{:?}", a.keys());
    for (name, bytes) in &a {
        assert!(
            bytes == &b[name],
            "{name} differs between streamed and whole"
        );
    }
    let table = grove::model::load(&model).unwrap().classes;
    for (name, (w, h)) in inputs {
        let input = images.join(format!("{name}.tif"));
        for map in [
            "labels",
            "overlays",
            "confidence",
            "uncertainty/margin",
            "uncertainty/entropy",
        ] {
            let out = whole.join(format!("{map}/{name}.tif"));
            for code in [282, 283, 296, 33550, 33922, 34264, 34735, 34736, 34737] {
                assert_eq!(
                    tag(&out, code),
                    tag(&input, code),
                    "{map}/{name}: tag {code}"
                );
            }
        }
        let (shape, p) = read_npy(&whole.join(format!("probabilities/{name}.npy")));
        let k = table.len();
        assert_eq!(shape, format!("({h}, {w}, {k})"));
        let ids = match read_label_file(&whole.join(format!("labels/{name}.tif")))
            .unwrap()
            .pixels
        {
            LabelPixels::Values(v) => v,
            LabelPixels::Colours(_) => panic!("palette label map read as colours"),
        };
        for (px, id) in p.chunks_exact(k).zip(&ids) {
            let sum: f32 = px.iter().sum();
            assert!(
                (sum - 1.0).abs() < 1e-4,
                "{name}: probabilities sum to {sum}"
            );
            let best = (0..k).fold(0, |b, c| if px[c] > px[b] { c } else { b });
            assert_eq!(
                table.classes()[best].id,
                *id,
                "{name}: label ≠ most probable"
            );
        }
    }
    // Probability maps in TIFF: one 8-bit grey map per class, probability × 255 (rounded
    // half away from zero, as Rust's `round`).
    let maps = t.path().join("maps");
    let o = grove_bin(
        usize::MAX,
        &[
            "apply",
            model.to_str().unwrap(),
            images.join("geo_rgb8_strips.tif").to_str().unwrap(),
            "--out",
            maps.to_str().unwrap(),
            "--smooth",
            "none",
            "--tile",
            "24",
            "--map-format",
            "tiff",
            "--probabilities",
        ],
    );
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let (_, p) = read_npy(&whole.join("probabilities/geo_rgb8_strips.npy"));
    let k = table.len();
    for (c, class) in table.classes().iter().enumerate() {
        let path = maps.join(format!("probabilities/geo_rgb8_strips/{}.tif", class.name));
        let mut d = tiff::decoder::Decoder::new(std::fs::File::open(&path).unwrap()).unwrap();
        assert_eq!(d.colortype().unwrap(), tiff::ColorType::Gray(8));
        let tiff::decoder::DecodingResult::U8(v) = d.read_image().unwrap() else {
            panic!("{path:?} is not 8-bit");
        };
        let expect: Vec<u8> = p
            .iter()
            .skip(c)
            .step_by(k)
            .map(|&x| (x * 255.0).round() as u8)
            .collect();
        assert_eq!(v, expect, "{path:?}");
    }
    // A TIFF label map goes back into a dataset as labels (to be corrected and retrained on).
    let data = t.path().join("data");
    std::fs::create_dir_all(data.join("images")).unwrap();
    std::fs::create_dir_all(data.join("labels")).unwrap();
    std::fs::copy(whole.join("classes.toml"), data.join("classes.toml")).unwrap();
    let name = "geo_rgb8_strips.tif";
    std::fs::copy(images.join(name), data.join("images").join(name)).unwrap();
    std::fs::copy(
        whole.join("labels").join(name),
        data.join("labels").join(name),
    )
    .unwrap();
    let ds = Dataset::open(&data, LabelOptions::default()).unwrap();
    assert!(ds.warnings.is_empty(), "{:?}", ds.warnings);
    let (image, labels) = ds.load_pair(ds.labelled()[0]).unwrap();
    assert_eq!((labels.width, labels.height), (image.width, image.height));
    assert!(labels.indices.iter().all(|&c| (c as usize) < table.len()));
}

/// `apply` on `input` fails naming it with `words`, and writes no map.
fn refused(model: &Path, input: &Path, extra: &[&str], words: &str) {
    let t = tempfile::tempdir().unwrap();
    let out = t.path().join("out");
    let mut args = vec![
        "apply",
        model.to_str().unwrap(),
        input.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ];
    args.extend_from_slice(extra);
    let o = grove_bin(usize::MAX, &args);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(!o.status.success(), "accepted {input:?}");
    assert!(err.contains(&input.display().to_string()), "{err}");
    assert!(err.contains(words), "{err}");
    assert!(!err.contains("panicked"), "{err}");
    for map in ["labels", "overlays", "probabilities"] {
        let dir = out.join(map);
        let n = std::fs::read_dir(&dir).map(|d| d.count()).unwrap_or(0);
        assert_eq!(n, 0, "{map} has files");
    }
}

#[test]
fn bad_tiffs_are_refused_naming_the_file() {
    let t = tempfile::tempdir().unwrap();
    let model = train_small(t.path());
    let good = std::fs::read(fixture("inputs/geo_rgb8_strips.tif")).unwrap();
    let (at, _) = find_entry(&good, 34735).unwrap().unwrap();
    // GeoKeyDirectory whose values lie past the end of the file.
    let mut past_end = good.clone();
    past_end[at + 8..at + 12].copy_from_slice(&(good.len() as u32 + 100).to_le_bytes());
    let past_end_path = t.path().join("past_end.tif");
    std::fs::write(&past_end_path, &past_end).unwrap();
    refused(
        &model,
        &past_end_path,
        &["--map-format", "tiff"],
        "tag 34735: its values lie beyond the end of the file",
    );
    // A count of two billion values.
    let mut huge = good;
    huge[at + 4..at + 8].copy_from_slice(&0x7fff_ffffu32.to_le_bytes());
    let huge_path = t.path().join("huge_count.tif");
    std::fs::write(&huge_path, &huge).unwrap();
    refused(
        &model,
        &huge_path,
        &["--map-format", "tiff"],
        "tag 34735 announces too many values",
    );
    // Signed 16-bit samples (SampleFormat 2, written by tifffile).
    refused(
        &model,
        &fixture("inputs/signed16.tif"),
        &[],
        "sample format 2",
    );
}

#[test]
fn npy_files_grove_recorded_are_replaced_foreign_ones_are_not() {
    // A `.npy` has no room for grove's signature, so `apply` trusts the resume record that
    // lists it (see `Records::recorded_outputs`).
    let t = tempfile::tempdir().unwrap();
    let model = train_small(t.path());
    let input = fixture("inputs/geo_rgb8_strips.tif");
    let apply = |out: &Path, extra: &[&str]| {
        let mut args = vec![
            "apply",
            model.to_str().unwrap(),
            input.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--probabilities",
            "npy",
        ];
        args.extend_from_slice(extra);
        grove_bin(usize::MAX, &args)
    };
    let out = t.path().join("out");
    assert!(apply(&out, &[]).status.success());
    // Other settings: the record no longer matches, but its files are grove's.
    let o = apply(&out, &["--confidence"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let foreign = t.path().join("foreign");
    std::fs::create_dir_all(foreign.join("probabilities")).unwrap();
    let npy = foreign.join("probabilities/geo_rgb8_strips.npy");
    std::fs::write(&npy, b"someone else's array").unwrap();
    let o = apply(&foreign, &[]);
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(!o.status.success());
    assert!(err.contains("was not written by grove"), "{err}");
    assert_eq!(std::fs::read(&npy).unwrap(), b"someone else's array");
}

//! `grove areas`: error-adjusted area estimates from apply's label maps and a reference.

use std::path::PathBuf;

use clap::Args;

use crate::cli::LabelArgs;
use crate::dataset::{list_images, read_labels_for, stem_of, ClassTable};
use crate::error::{GroveError, Result};
use crate::eval::area_estimate::{bootstrap_area_ci, estimate, ErrorMatrix};
use crate::eval::areas::PixelSize;
use crate::imageio::write_atomic;

#[derive(Args, Debug)]
pub struct AreasArgs {
    /// Output folder of `grove apply` (labels/ and classes.toml).
    pub maps: PathBuf,
    /// Reference labels for some of the same image stems (DATA/labels/STEM.png and
    /// DATA/classes.toml): fully labelled images or a sparse sample of pixels.
    #[arg(long, value_name = "DATA")]
    pub reference: PathBuf,
    /// Side of one pixel with its unit (e.g. 0.05m): areas in the unit squared.
    #[arg(long, value_name = "SIZE")]
    pub pixel_size: Option<PixelSize>,
    /// Also write the estimates as JSON.
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    #[command(flatten)]
    pub labels: LabelArgs,
    /// Replace existing files in the output places that grove did not write.
    #[arg(long)]
    pub force: bool,
}

pub fn run(args: AreasArgs) -> Result<()> {
    let table_path = args.maps.join("classes.toml");
    if !table_path.is_file() {
        return Err(GroveError::input(
            &args.maps,
            "not an apply output folder: expected classes.toml and labels/ (write them with grove apply --out)",
        ));
    }
    let opts = args.labels.options();
    let classes = ClassTable::load(&table_path, opts.unlabelled_value)?;
    let ref_table_path = args.reference.join("classes.toml");
    let ref_classes = ClassTable::load(&ref_table_path, opts.unlabelled_value)?;
    if ref_classes != classes {
        return Err(GroveError::input(
            &ref_table_path,
            format!(
                "class table differs from the maps' ({})",
                classes.names().join(", ")
            ),
        ));
    }
    let k = classes.len();
    let maps = list_images(&args.maps.join("labels"))?;
    if let Some(json) = &args.json {
        let inputs = [table_path.as_path(), ref_table_path.as_path()];
        crate::output_guard::OutputGuard::new(
            inputs.into_iter().chain(maps.iter().map(PathBuf::as_path)),
            args.force,
        )
        .check_file(json)?;
    }
    if maps.is_empty() {
        return Err(GroveError::input(args.maps.join("labels"), "no label maps"));
    }
    let mut map_pixels = vec![0u64; k];
    let mut per_image = Vec::new();
    let mut whole_images = 0;
    let ref_dir = args.reference.join("labels");
    for path in &maps {
        let map = crate::dataset::labels::read_labels(path, &classes, &opts)?;
        for (c, n) in map.class_counts(k).into_iter().enumerate() {
            map_pixels[c] += n;
        }
        let ref_path = ref_dir.join(format!("{}.png", stem_of(path)));
        if ref_path.is_file() {
            let r = read_labels_for(&ref_path, &classes, &opts, (map.width, map.height))?;
            let mut m = ErrorMatrix::new(k);
            m.add(&map.indices, &r.indices);
            if m.total() * 2 >= r.indices.len() as u64 {
                whole_images += 1;
            }
            if m.total() > 0 {
                per_image.push(m);
            }
        }
    }
    let mut all = ErrorMatrix::new(k);
    per_image.iter().for_each(|m| all.add_matrix(m));
    if all.total() == 0 {
        return Err(GroveError::input(
            &ref_dir,
            "no reference pixels for any map (labels/STEM.png with the maps' stems)",
        ));
    }
    let unit = args.pixel_size.as_ref().map(|p| p.area_unit());
    let pixel_area = args.pixel_size.as_ref().map(|p| {
        (
            p.pixel_area(),
            unit.as_deref().expect("set with the pixel size"),
        )
    });
    let mut est = estimate(&classes.names(), &map_pixels, &all, pixel_area);
    if whole_images > 0 {
        est.notes.push(format!(
            "{whole_images} reference image{} mostly labelled: neighbouring pixels of one image are not independent samples, so the intervals above are too narrow; the bootstrap over the {} reference images (area_ci95_bootstrap) is the more honest one{}",
            if whole_images == 1 { " is" } else { "s are" },
            per_image.len(),
            if per_image.len() < 10 { ", though with so few images it is rough too" } else { "" }
        ));
        let scale = est.total_pixels as f64 * pixel_area.map_or(1.0, |(a, _)| a);
        let boot = bootstrap_area_ci(&map_pixels, &per_image, scale, 2000, 0);
        for (c, b) in est.classes.iter_mut().zip(boot) {
            c.area_ci95_bootstrap = Some(b);
        }
    }
    print_table(&est);
    if let Some(path) = &args.json {
        let json = serde_json::to_string_pretty(&est).expect("estimates serialise") + "\n";
        write_atomic(path, json.as_bytes())?;
        println!("estimates written to {}", path.display());
    }
    Ok(())
}

fn print_table(e: &crate::eval::area_estimate::AreaEstimate) {
    let width = e
        .classes
        .iter()
        .map(|c| c.name.len())
        .max()
        .unwrap_or(5)
        .max(5);
    let pct = |v: Option<f64>| v.map_or("   -  ".into(), |v| format!("{:5.1}%", 100.0 * v));
    let half = |ci: Option<[f64; 2]>| {
        ci.map_or("     ".into(), |c| format!("±{:4.1}", 50.0 * (c[1] - c[0])))
    };
    println!(
        "{} mapped pixels, {} reference pixels; overall accuracy {:.1}% ± {:.1}\n",
        e.total_pixels,
        e.classes.iter().map(|c| c.sample_pixels).sum::<u64>(),
        100.0 * e.overall_accuracy,
        50.0 * (e.overall_accuracy_ci95[1] - e.overall_accuracy_ci95[0])
    );
    println!(
        "{:<width$}  {:>12}  {:>14}  {:>29}  {:>13}  {:>13}",
        "class",
        "mapped",
        format!("area ({})", e.unit),
        "95 % interval",
        "user's acc.",
        "producer's"
    );
    for c in &e.classes {
        println!(
            "{:<width$}  {:>12}  {:>14.1}  {:>14.1} – {:<12.1}  {} {}  {} {}",
            c.name,
            c.map_pixels,
            c.area,
            c.area_ci95[0],
            c.area_ci95[1],
            pct(c.users_accuracy),
            half(c.users_accuracy_ci95),
            pct(c.producers_accuracy),
            half(c.producers_accuracy_ci95)
        );
        if let Some(b) = c.area_ci95_bootstrap {
            println!(
                "{:<width$}  {:>12}  {:>14}  {:>14.1} – {:<12.1}  (bootstrap over images)",
                "", "", "", b[0], b[1]
            );
        }
    }
    for n in &e.notes {
        println!("\nnote: {n}");
    }
    println!("\nThese are estimates with sampling error; a qualified person should check them before they drive decisions.");
}

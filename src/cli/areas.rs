//! `grove areas`: error-adjusted area estimates from apply's label maps and a reference.

use std::path::{Path, PathBuf};

use clap::Args;

use crate::cli::LabelArgs;
use crate::dataset::{list_images, read_labels_for, stem_of, ClassTable};
use crate::error::{GroveError, Result};
use crate::eval::area_estimate::{bootstrap_area_ci, estimate, ErrorMatrix};
use crate::eval::areas::PixelSize;
use crate::imageio::{output_path, write_atomic};

#[derive(Args, Debug)]
pub struct AreasArgs {
    /// Output folder of `grove apply` (labels/ and classes.toml).
    pub maps: PathBuf,
    /// Reference labels for some of the same image stems (DATA/labels/STEM.png and
    /// DATA/classes.toml): fully labelled images or a sparse sample of pixels, such as a
    /// filled-in --plan.
    #[arg(long, value_name = "DATA", required_unless_present = "plan")]
    pub reference: Option<PathBuf>,
    /// Instead of estimating: draw a stratified random sample of N pixels over the maps
    /// (each mapped class at least min(50, N / 2K), the rest by mapped area) and write, into
    /// --out, per map a label PNG with the sampled pixels white on transparent (paint each
    /// in its true class colour; unpainted ones are ignored), a picture marking them,
    /// points.csv and classes.toml; the filled-in folder is a valid --reference.
    #[arg(long, value_name = "N", conflicts_with = "reference", requires = "out",
          value_parser = clap::value_parser!(u32).range(1..=10_000_000))]
    pub plan: Option<u32>,
    /// Folder for the --plan files.
    #[arg(long, value_name = "PLAN_DIR")]
    pub out: Option<PathBuf>,
    /// Seed of the --plan sample.
    #[arg(long, default_value_t = 0)]
    pub seed: u64,
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
    let reference = match (&args.reference, args.plan, &args.out) {
        (Some(r), _, _) => r.clone(),
        (None, Some(n), Some(out)) => return plan(&args, &classes, n as usize, out),
        _ => unreachable!("clap requires --reference or --plan with --out"),
    };
    let ref_table_path = reference.join("classes.toml");
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
    let ref_dir = reference.join("labels");
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

/// `--plan`: the sample and its files.
fn plan(args: &AreasArgs, classes: &ClassTable, n: usize, out: &Path) -> Result<()> {
    use crate::eval::area_plan::{allocate, draw};
    let opts = args.labels.options();
    let paths = list_images(&args.maps.join("labels"))?;
    if paths.is_empty() {
        return Err(GroveError::input(args.maps.join("labels"), "no label maps"));
    }
    let guard =
        crate::output_guard::OutputGuard::new(paths.iter().map(PathBuf::as_path), args.force);
    guard.check_dir(out)?;
    let k = classes.len();
    let mut maps = Vec::with_capacity(paths.len());
    let mut pixels = vec![0u64; k];
    for path in &paths {
        let map = crate::dataset::labels::read_labels(path, classes, &opts)?;
        for (c, p) in map.class_counts(k).into_iter().enumerate() {
            pixels[c] += p;
        }
        maps.push(map);
    }
    let per_class = allocate(n, &pixels);
    let views: Vec<&[u8]> = maps.iter().map(|m| m.indices.as_slice()).collect();
    let widths: Vec<usize> = maps.iter().map(|m| m.width).collect();
    let points = draw(&views, &widths, &per_class, args.seed);
    let stems: Vec<String> = paths.iter().map(|p| stem_of(p)).collect();
    let files: Vec<PathBuf> = stems
        .iter()
        .flat_map(|s| {
            [
                output_path(&out.join("labels"), s, "png"),
                output_path(&out.join("pictures"), s, "png"),
            ]
        })
        .chain([out.join("points.csv"), out.join("classes.toml")])
        .collect();
    for f in &files {
        guard.check_file(f)?;
    }
    let mut csv = String::from("image,x,y,map_class\n");
    for p in &points {
        csv += &format!(
            "{},{},{},{}\n",
            stems[p.map],
            p.x,
            p.y,
            classes.classes()[p.class].name
        );
    }
    for (i, map) in maps.iter().enumerate() {
        let mine: Vec<_> = points.iter().filter(|p| p.map == i).collect();
        if mine.is_empty() {
            continue;
        }
        let (w, h) = (map.width, map.height);
        let mut rgba = vec![0u8; w * h * 4];
        for p in &mine {
            rgba[(p.y * w + p.x) * 4..][..4].copy_from_slice(&[255; 4]);
        }
        write_atomic(
            &output_path(&out.join("labels"), &stems[i], "png"),
            &crate::imageio::encode_png(w, h, png::ColorType::Rgba, None, &rgba),
        )?;
        let overlay = args.maps.join("overlays").join(format!("{}.png", stems[i]));
        let picture = crate::eval::area_plan::mark_points(&overlay, map, classes, &mine);
        crate::imageio::write_rgb_png(
            &output_path(&out.join("pictures"), &stems[i], "png"),
            w,
            h,
            &picture,
        )?;
    }
    write_atomic(&out.join("points.csv"), csv.as_bytes())?;
    write_atomic(&out.join("classes.toml"), classes.to_toml().as_bytes())?;
    println!(
        "{} sample pixels over {} maps ({}) in {}",
        points.len(),
        maps.len(),
        classes
            .names()
            .iter()
            .zip(&per_class)
            .map(|(c, n)| format!("{c} {n}"))
            .collect::<Vec<_>>()
            .join(", "),
        out.display()
    );
    println!(
        "next: in each {}/labels/NAME.png paint every white pixel in the colour of its true class (pictures/ shows where they are; points.csv lists them), then run grove areas {} --reference {}",
        out.display(),
        args.maps.display(),
        out.display()
    );
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

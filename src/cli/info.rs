//! `grove info`: what a model file holds, so a model found on disk months later can be
//! traced back to its data and settings.

use std::path::PathBuf;

use clap::Args;

use crate::dataset::classes::hex_colour;
use crate::error::Result;

#[derive(Args, Debug)]
pub struct InfoArgs {
    /// Model file written by `grove train`.
    pub model: PathBuf,
    /// How many of the most informative features to list.
    #[arg(long, default_value_t = 10, value_name = "N")]
    pub top: usize,
}

pub fn run(args: InfoArgs) -> Result<()> {
    let m = crate::model::load(&args.model)?;
    let p = &m.provenance;
    println!("{}", args.model.display());
    println!(
        "  made by grove {} on {}, seed {}",
        p.grove_version,
        utc_timestamp(p.created_unix),
        p.seed
    );
    println!(
        "  {} trees, {} features ({} colour channel{}), {} textons",
        m.forest.n_trees(),
        m.features.n_features(),
        m.features.channels,
        if m.features.channels == 1 { "" } else { "s" },
        m.features.textons.as_ref().map_or(0, |t| t.k())
    );
    let c = &p.config;
    println!(
        "  settings: scales {:?}{}, texton windows {:?}, {} samples per image, depth ≤ {}, leaf ≥ {}{}",
        c.features.bank.scales,
        if c.features.bank.filter_chroma { "" } else { " (lightness only)" },
        c.features.texton_windows,
        c.samples_per_image,
        c.forest.max_depth,
        c.forest.min_samples_leaf,
        if c.features.position { ", position on" } else { ", position off" }
    );
    println!(
        "  smoothing default: {} (apply/eval: --smooth, --smooth-strength override it)",
        m.smoothing.describe()
    );
    if let Some(oob) = p.oob_accuracy {
        println!("  out-of-bag accuracy on sampled pixels: {oob:.4}");
    }
    println!("  classes (id, name, colour, labelled px, sampled px):");
    for (i, c) in m.classes.classes().iter().enumerate() {
        println!(
            "    {:>3}  {:<16} {}  {:>10}  {:>8}",
            c.id,
            c.name,
            hex_colour(c.color),
            p.labelled_per_class[i],
            p.samples_per_class[i]
        );
    }
    println!("  trained on {} images:", p.training_images.len());
    for t in &p.training_images {
        println!(
            "    {}  sha256 {}  {} labelled px",
            t.name,
            &t.image_sha256[..16],
            t.labelled_pixels
        );
    }
    println!("  most informative features (impurity importance):");
    for (name, v) in m.ranked_importances().iter().take(args.top) {
        println!("    {name:<20} {v:.4}");
    }
    Ok(())
}

/// `YYYY-MM-DD HH:MM UTC` from Unix seconds (civil-from-days, H. Hinnant,
/// "chrono-Compatible Low-Level Date Algorithms"), to avoid a date dependency for one line.
fn utc_timestamp(secs: u64) -> String {
    let days = (secs / 86_400) as i64;
    let rem = secs % 86_400;
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02} {:02}:{:02} UTC",
        rem / 3600,
        rem % 3600 / 60
    )
}

#[cfg(test)]
mod tests {
    #[test]
    fn timestamps_match_known_dates() {
        // Known instants: the Unix epoch, and 2000-03-01 00:00 UTC = 951868800 (a leap-year edge).
        assert_eq!(super::utc_timestamp(0), "1970-01-01 00:00 UTC");
        assert_eq!(super::utc_timestamp(951_868_800), "2000-03-01 00:00 UTC");
        assert_eq!(
            super::utc_timestamp(951_868_800 - 60),
            "2000-02-29 23:59 UTC"
        );
    }
}

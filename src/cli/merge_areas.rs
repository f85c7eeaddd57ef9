//! `grove merge-areas`.

use std::path::PathBuf;

use clap::Args;

use crate::batch::merge_areas;
use crate::error::{GroveError, Result};
use crate::imageio::write_atomic;

#[derive(Args, Debug)]
pub struct MergeAreasArgs {
    /// Output folders of `grove apply` (one per shard), or areas.json / areas.csv files.
    #[arg(required = true, value_name = "DIR")]
    pub inputs: Vec<PathBuf>,
    /// Write the merged table here (.csv or .json); without it, the CSV goes to stdout.
    #[arg(long, short, value_name = "FILE")]
    pub out: Option<PathBuf>,
    /// Replace existing files in the output places that grove did not write.
    #[arg(long)]
    pub force: bool,
}

pub fn run(args: MergeAreasArgs) -> Result<()> {
    if let Some(out) = &args.out {
        let files: Vec<PathBuf> = args
            .inputs
            .iter()
            .flat_map(|i| [i.clone(), i.join("areas.csv"), i.join("areas.json")])
            .collect();
        crate::output_guard::OutputGuard::new(files.iter().map(PathBuf::as_path), args.force)
            .check_file(out)?;
    }
    let table = merge_areas(&args.inputs)?;
    let Some(out) = &args.out else {
        print!("{}", table.to_csv());
        return Ok(());
    };
    let ext = out
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    let text = match ext.as_deref() {
        Some("csv") => table.to_csv(),
        Some("json") => table.to_json(),
        _ => {
            return Err(GroveError::Config(format!(
                "--out {}: name a .csv or .json file",
                out.display()
            )))
        }
    };
    write_atomic(out, text.as_bytes())?;
    eprintln!(
        "merged {} folder{} ({} image{}) into {}",
        args.inputs.len(),
        if args.inputs.len() == 1 { "" } else { "s" },
        table.images().count(),
        if table.images().count() == 1 { "" } else { "s" },
        out.display()
    );
    Ok(())
}

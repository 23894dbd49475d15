//! `tidewise report DIR`: one self-contained HTML page of a sweep, a training run or a
//! bit-width estimate.

use std::path::PathBuf;

use anyhow::Result;

use crate::io::write_atomic;
use crate::sweep::report::{self, ReportOptions};

/// Arguments of `tidewise report`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// A sweep folder, a training folder or a bit-width estimate folder.
    pub dir: PathBuf,
    /// The page to write (default: DIR/report.html).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Grid axis of the heatmap rows (default: the second-largest axis other than run.seed).
    #[arg(long)]
    pub rows: Option<String>,
    /// Grid axis of the heatmap columns (default: the largest axis other than run.seed).
    #[arg(long)]
    pub cols: Option<String>,
}

/// Runs `tidewise report`.
pub fn main(args: Args) -> Result<()> {
    let opts = ReportOptions {
        rows: args.rows.clone(),
        cols: args.cols.clone(),
    };
    let r = report::render(&args.dir, &opts)?;
    let out = args.out.unwrap_or_else(|| args.dir.join("report.html"));
    write_atomic(&out, r.html.as_bytes())?;
    let folder = out.parent().map(|p| p.to_path_buf()).unwrap_or_default();
    for (name, svg) in &r.figures {
        write_atomic(&folder.join(name), svg.as_bytes())?;
    }
    println!(
        "wrote {} ({}){}",
        out.display(),
        r.sections.join(", "),
        if r.figures.is_empty() {
            String::new()
        } else {
            format!(
                " and {} beside it",
                r.figures
                    .iter()
                    .map(|f| f.0.as_str())
                    .collect::<Vec<_>>()
                    .join(", ")
            )
        }
    );
    Ok(())
}

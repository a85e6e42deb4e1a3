//! `dosemill report`: print a summary of a result file and optionally draw its plots.

use std::path::PathBuf;

use crate::cli::EXIT_BAD_INPUT;
use crate::output::{self, OutputError};
use crate::report;

/// Arguments of `dosemill report`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Result file (HDF5) written by a run.
    #[arg(value_name = "RESULT.h5")]
    pub result: PathBuf,
    /// Draw PNG plots into this folder (created if missing).
    #[arg(long, value_name = "DIR")]
    pub plots: Option<PathBuf>,
    /// Replace plot files that already exist in the plot folder.
    #[arg(long)]
    pub force: bool,
}

/// Run the subcommand; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let file = match output::read(&args.result) {
        Ok(f) => f,
        Err(
            e @ (OutputError::Io { .. }
            | OutputError::Hdf5 { .. }
            | OutputError::Unsupported { .. }),
        ) => {
            eprintln!("dosemill: error: {e}");
            return Ok(EXIT_BAD_INPUT);
        }
        Err(e) => return Err(e.into()),
    };
    print!(
        "{}",
        report::summarize(&file, &args.result.display().to_string())
    );
    if let Some(dir) = &args.plots {
        let outcome = report::plot_all(&file, dir, args.force)?;
        for p in &outcome.skipped {
            println!("not plotted: {p}");
        }
        for p in &outcome.written {
            println!("plot: {}", p.display());
        }
    }
    Ok(0)
}

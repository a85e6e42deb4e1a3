//! `dosemill protocol PROTOCOL.toml|.csv`: evaluates every exam of a protocol and writes the
//! report (CSV, HDF5, HTML) into `--out`. Exit code 2 for a bad protocol file, 1 when a figure is
//! beyond its tolerance or above its reference level, 0 otherwise.

use std::path::PathBuf;

use crate::protocol::{self, format, report, RunPlan};

/// Arguments of `dosemill protocol`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Protocol file (.toml or .csv).
    pub protocol: PathBuf,
    /// Folder for protocol.csv, protocol.h5 and protocol.html.
    #[arg(long, default_value = "protocol_report")]
    pub out: PathBuf,
    /// Histories of each phantom run (free-in-air runs get twice as many).
    #[arg(long)]
    pub histories: Option<u64>,
    /// Fewer histories (100 000 per phantom run) for a fast look.
    #[arg(long)]
    pub quick: bool,
    /// Run seed.
    #[arg(long, default_value_t = 20_240_601)]
    pub seed: u64,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Replace existing report files.
    #[arg(long)]
    pub force: bool,
}

/// Histories of each phantom run by default.
pub const DEFAULT_HISTORIES: u64 = 1_000_000;
/// Histories of each phantom run with `--quick`.
pub const QUICK_HISTORIES: u64 = 100_000;

/// Runs the command; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let p = match format::read(&args.protocol) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("dosemill: {e}");
            return Ok(super::EXIT_BAD_INPUT);
        }
    };
    let histories = args.histories.unwrap_or(if args.quick { QUICK_HISTORIES } else { DEFAULT_HISTORIES });
    if histories < 1000 {
        eprintln!("dosemill: --histories {histories}: give at least 1000");
        return Ok(super::EXIT_BAD_INPUT);
    }
    let threads = args.threads.unwrap_or_else(|| std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1));
    let plan = RunPlan { histories, seed: args.seed, threads };
    if let Err(e) = protocol::check_inputs(&p) {
        eprintln!("dosemill: {e}");
        return Ok(super::EXIT_BAD_INPUT);
    }
    let results = protocol::evaluate(&p, &plan)?;
    let w = report::write_all(&args.out, &p, &results, args.force)?;
    let mut flagged = 0;
    for r in &results {
        for f in &r.figures {
            if f.status.flagged() || f.reference_status.flagged() {
                flagged += 1;
                println!("{}: {}: {} ± {} {} {} {}", r.exam.name, f.key, f.computed.value, f.computed.sigma, f.unit, f.status.label(), f.reference_status.label());
            }
        }
    }
    println!("wrote {}, {}, {}", w.csv.display(), w.h5.display(), w.html.display());
    println!("research estimate: to be reviewed by a qualified medical physicist; not a substitute for measurement");
    Ok(if flagged > 0 { super::EXIT_FAILURE } else { 0 })
}

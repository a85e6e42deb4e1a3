//! `dosemill validate [--json] [--quick]`: runs the built-in validation cases (closed forms,
//! published tables, rules of thumb) and prints a table; exit code 1 if any case fails.

use crate::validation::{self, Effort};

/// Arguments of `dosemill validate`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Print the cases as JSON instead of a table.
    #[arg(long)]
    pub json: bool,
    /// Fewer histories (the set the test suite runs; under two minutes on two cores).
    #[arg(long)]
    pub quick: bool,
    /// Worker threads (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
}

/// Runs the cases; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let threads = args.threads.unwrap_or_else(|| std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1));
    let effort = if args.quick { Effort::quick(threads) } else { Effort::full(threads) };
    let cases = validation::run_all(&effort)?;
    if args.json {
        println!("{}", serde_json::to_string_pretty(&cases)?);
    } else {
        print!("{}", validation::table(&cases));
    }
    Ok(if cases.iter().all(|c| c.pass) { 0 } else { super::EXIT_FAILURE })
}

//! Command-line interface: one module per subcommand; each owns its clap `Args` and a `run`.
//!
//! Exit codes: 0 success, 1 a run or check failed, 2 bad input (usage, deck, values),
//! 3 run interrupted (checkpoint and partial result written), 4 aborted by a second signal,
//! 5 run refused: it would exceed the memory or disk limit.

use clap::{Parser, Subcommand};

pub mod attenuation;
pub mod bench;
pub mod check;
pub mod run;
pub mod materials;
pub mod merge;
pub mod resume;
pub mod protocol;
pub mod validate;
pub mod report;
pub mod spectrum;

/// Exit code for bad input (unknown material, out-of-range value, malformed deck).
pub const EXIT_BAD_INPUT: i32 = 2;
/// Exit code when a run or validation failed.
pub const EXIT_FAILURE: i32 = 1;

#[derive(Parser, Debug)]
#[command(name = "dosemill", version, about = "Monte Carlo photon transport for kilovoltage x-ray dosimetry and imaging scatter (research use)")]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run decks (batch); every sweep combination is its own job.
    Run(run::Args),
    /// Continue an interrupted run from its checkpoint.
    Resume(resume::Args),
    /// Merge the shard files of one run into one result file.
    Merge(merge::Args),
    /// Validate decks and print them resolved, without running.
    Check(check::Args),
    /// List the built-in materials library.
    Materials(materials::Args),
    /// Attenuation and energy-absorption coefficients of a material.
    Attenuation(attenuation::Args),
    /// X-ray tube spectrum and beam quality.
    Spectrum(spectrum::Args),
    /// Summarise a result file and draw its plots.
    Report(report::Args),
    /// Measure the speed of the reference problems.
    Bench(bench::Args),
    /// Evaluate the exams of a protocol (doses, backscatter, depth dose) and write a report.
    Protocol(protocol::Args),
    /// Run the built-in validation cases against published and closed-form references.
    Validate(validate::Args),
}

/// Parse the command line and run; returns the process exit code.
pub fn main() -> i32 {
    run::quiet_on_closed_pipe();
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let code = if e.use_stderr() { EXIT_BAD_INPUT } else { 0 };
            let _ = e.print();
            return code;
        }
    };
    let result = match cli.command {
        Command::Run(a) => run::run(a),
        Command::Resume(a) => resume::run(a),
        Command::Merge(a) => merge::run(a),
        Command::Check(a) => check::run(a),
        Command::Materials(a) => materials::run(a),
        Command::Attenuation(a) => attenuation::run(a),
        Command::Spectrum(a) => spectrum::run(a),
        Command::Report(a) => report::run(a),
        Command::Bench(a) => bench::run_bench(a),
        Command::Protocol(a) => protocol::run(a),
        Command::Validate(a) => validate::run(a),
    };
    match result {
        Ok(code) => code,
        Err(e) => {
            eprintln!("dosemill: error: {e:#}");
            EXIT_FAILURE
        }
    }
}

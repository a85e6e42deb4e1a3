//! `dosemill resume CHECKPOINT`: continues the run a checkpoint belongs to (same deck file,
//! sweep combination, output, seed, shard) and finishes it as if it had never stopped.

use super::run::{run_decks, Options};
use crate::runstate::checkpoint::Checkpoint;
use std::path::PathBuf;

/// Arguments of `dosemill resume`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The checkpoint file (`<output>.ckpt`).
    pub checkpoint: PathBuf,
    /// Worker threads (default: as the interrupted run; the result does not depend on it).
    #[arg(long)]
    pub threads: Option<usize>,
    /// No progress bar and no per-job line.
    #[arg(long)]
    pub quiet: bool,
    /// Write a checkpoint at least this often (seconds).
    #[arg(long, value_name = "S")]
    pub checkpoint_every_s: Option<f64>,
    /// Write a checkpoint after every this many chunks.
    #[arg(long, value_name = "N")]
    pub checkpoint_every_chunks: Option<u64>,
}

/// Runs `dosemill resume`; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let c = match Checkpoint::read_header(&args.checkpoint) {
        Ok(c) => c,
        Err(e) => {
            eprintln!("dosemill: {e}");
            return Ok(super::EXIT_BAD_INPUT);
        }
    };
    let job = &c.header.job;
    let expected = crate::runstate::checkpoint::path_for(&match job.shard {
        Some(s) => crate::runstate::shard::path_for(&job.output, s),
        None => job.output.clone(),
    });
    if std::path::absolute(&expected).ok() != std::path::absolute(&args.checkpoint).ok() {
        eprintln!(
            "dosemill: {}: this checkpoint belongs to the result {}; it must sit beside it as {} to be resumed (move it back)",
            args.checkpoint.display(),
            job.output.display(),
            expected.display()
        );
        return Ok(super::EXIT_BAD_INPUT);
    }
    let out_dir = job.output.parent().map(PathBuf::from);
    let options = Options {
        threads: args.threads.or(job.threads),
        seed: job.seed_override,
        out: out_dir,
        quiet: args.quiet,
        force: false,
        resume: true,
        checkpoint_every_s: args.checkpoint_every_s,
        checkpoint_every_chunks: args.checkpoint_every_chunks,
        shard: job.shard,
    };
    run_decks(std::slice::from_ref(&job.deck_path), &options, Some(&job.sweep))
}

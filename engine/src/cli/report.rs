//! `dosemill report` (under construction).

/// Arguments of `dosemill report`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Run the subcommand; returns the exit code.
pub fn run(_args: Args) -> anyhow::Result<i32> {
    anyhow::bail!("`report` is not implemented yet")
}

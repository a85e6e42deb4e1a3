//! `dosemill spectrum` (under construction).

/// Arguments of `dosemill spectrum`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Run the subcommand; returns the exit code.
pub fn run(_args: Args) -> anyhow::Result<i32> {
    anyhow::bail!("`spectrum` is not implemented yet")
}

//! `dosemill materials` (under construction).

/// Arguments of `dosemill materials`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Run the subcommand; returns the exit code.
pub fn run(_args: Args) -> anyhow::Result<i32> {
    anyhow::bail!("`materials` is not implemented yet")
}

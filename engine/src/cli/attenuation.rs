//! `dosemill attenuation` (under construction).

/// Arguments of `dosemill attenuation`.
#[derive(clap::Args, Debug)]
pub struct Args {}

/// Run the subcommand; returns the exit code.
pub fn run(_args: Args) -> anyhow::Result<i32> {
    anyhow::bail!("`attenuation` is not implemented yet")
}

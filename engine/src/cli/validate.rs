//! `dosemill validate`.
/// Arguments of `dosemill validate`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Print JSON.
    #[arg(long)]
    pub json: bool,
    /// Quick set.
    #[arg(long)]
    pub quick: bool,
}
/// Runs.
pub fn run(_a: Args) -> anyhow::Result<i32> { Ok(0) }

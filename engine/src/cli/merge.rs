//! `dosemill merge OUT SHARD...`: combines the shard files of one run into the result file a
//! single machine would have written (same bits in every dataset).

use crate::output::{self, AttrValue};
use crate::results::{result_file, RunMeta};
use crate::runstate::{sha256_hex, shard};
use std::path::PathBuf;

/// Arguments of `dosemill merge`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// The merged result file to write (.h5).
    pub out: PathBuf,
    /// Shard files (`<stem>.shard-K-of-N.h5`), each once.
    #[arg(required = true)]
    pub shards: Vec<PathBuf>,
    /// Overwrite an existing OUT.
    #[arg(long)]
    pub force: bool,
}

/// Runs `dosemill merge`; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    match merge(&args) {
        Ok(histories) => {
            println!("merged {} shard file(s), {histories} histories -> {}", args.shards.len(), args.out.display());
            Ok(0)
        }
        Err(e) => {
            eprintln!("dosemill: merge: {e:#}");
            Ok(super::EXIT_FAILURE)
        }
    }
}

fn merge(args: &Args) -> anyhow::Result<u64> {
    if args.out.exists() && !args.force {
        anyhow::bail!("{} exists; pass --force to overwrite it or choose another name", args.out.display());
    }
    let shards = args.shards.iter().map(|p| shard::ShardFile::read(p)).collect::<Result<Vec<_>, _>>()?;
    let (identity, _) = shard::check_cover(&shards)?;
    let first = &shards[0];
    let text = |name: &str| first.file.attr(name).and_then(AttrValue::as_str).map(str::to_string);
    let resolved_text = text("resolved_deck").ok_or_else(|| anyhow::anyhow!("{}: no `resolved_deck` attribute", first.path.display()))?;
    if sha256_hex(resolved_text.as_bytes()) != identity.deck_sha256 {
        anyhow::bail!("{}: the stored deck does not match its recorded sha256 (file damaged?)", first.path.display());
    }
    let deck_name = first.path.with_extension("resolved.toml");
    let d = crate::deck::load_str(&resolved_text, &deck_name).map_err(|errs| {
        anyhow::anyhow!("{}: the stored deck no longer loads: {}", first.path.display(), errs.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; "))
    })?;
    let (problem, info) = crate::setup::build(&d.resolved)?;
    let result = shard::merge_results(&problem, &shards)?;
    let threads = first.file.attr("threads").and_then(AttrValue::as_f64).unwrap_or(1.0) as usize;
    let start_time = shards.iter().filter_map(|s| s.file.attr("start_time").and_then(AttrValue::as_str)).min().unwrap_or("").to_string();
    let sweep = first
        .file
        .attrs
        .iter()
        .filter_map(|(k, v)| Some((k.strip_prefix("sweep.")?.to_string(), v.as_str()?.to_string())))
        .collect();
    let meta = RunMeta {
        deck_text: text("deck_text").unwrap_or_default(),
        resolved_deck: resolved_text,
        seed: identity.seed,
        histories_requested: identity.histories,
        threads,
        start_time,
        completion: "complete".into(),
        sweep,
    };
    let mut file = result_file(&info, &result, &meta);
    file.set_attr("stop_reason", "all histories");
    file.set_attr("merged_shards", shards.len() as u64);
    if let Some(dir) = args.out.parent() {
        if !dir.as_os_str().is_empty() {
            std::fs::create_dir_all(dir)?;
        }
    }
    output::write_atomic(&args.out, &file, args.force)?;
    Ok(result.histories)
}

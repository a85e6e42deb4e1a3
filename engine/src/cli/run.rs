//! `dosemill run DECK...`: runs decks in turn (every sweep combination as its own job), writes
//! one HDF5 result per job, and ends with a summary table. A failing deck is reported and the
//! batch goes on; the exit code is 1 if any job failed.

use crate::deck;
use crate::output;
use crate::results::{now_rfc3339, result_file, RunMeta};
use crate::setup;
use crate::transport::{progress_bar, run_chunks_with, RunResult};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// Arguments of `dosemill run`.
#[derive(clap::Args, Debug)]
pub struct Args {
    /// Deck files (TOML) to run, in order.
    #[arg(required = true)]
    pub decks: Vec<PathBuf>,
    /// Worker threads (default: the deck's `run.threads`, else all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Random seed, overriding the deck's `run.seed`.
    #[arg(long)]
    pub seed: Option<u64>,
    /// Folder for the result files (default: where each deck's `run.output` says).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// No progress bar and no per-job lines; errors and the summary are still printed.
    #[arg(long)]
    pub quiet: bool,
    /// Overwrite existing result files.
    #[arg(long)]
    pub force: bool,
}

/// One job's line in the summary.
struct Outcome {
    deck: String,
    job: String,
    status: Result<String, String>,
    histories: u64,
    seconds: f64,
    output: String,
}

/// Loads and validates a deck, checking built-in material names against the library.
pub fn load_deck(path: &Path) -> Result<deck::Deck, Vec<deck::DeckError>> {
    let d = deck::load(path)?;
    deck::validate_with(&d, &|name| dosemill_xsdata::library::lookup(name).map(|_| ()).map_err(|e| e.to_string()))?;
    Ok(d)
}

/// Runs `args.decks`; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let mut outcomes = Vec::new();
    for path in &args.decks {
        let name = path.display().to_string();
        let d = match load_deck(path) {
            Ok(d) => d,
            Err(errors) => {
                for e in &errors {
                    eprintln!("{e}");
                }
                outcomes.push(Outcome { deck: name, job: "-".into(), status: Err(format!("{} deck error(s)", errors.len())), histories: 0, seconds: 0.0, output: "-".into() });
                continue;
            }
        };
        let deck_text = d.files.first().map(|f| f.text.clone()).unwrap_or_default();
        for (values, resolved) in deck::expand(&d) {
            let job = if values.is_empty() { "-".to_string() } else { values.iter().map(|(k, v)| format!("{k}={v}")).collect::<Vec<_>>().join(" ") };
            let out = match &args.out {
                Some(dir) => dir.join(resolved.run.output.file_name().unwrap_or_default()),
                None => resolved.run.output.clone(),
            };
            let started = Instant::now();
            let result = run_job(&resolved, &deck_text, &values, &out, &args);
            let (status, histories) = match result {
                Ok((h, note)) => (Ok(note), h),
                Err(e) => {
                    eprintln!("dosemill: {name} [{job}]: {e:#}");
                    (Err(format!("{e:#}")), 0)
                }
            };
            if !args.quiet {
                if let Ok(note) = &status {
                    println!("{name} [{job}]: {histories} histories, {note} -> {}", out.display());
                }
            }
            outcomes.push(Outcome { deck: name.clone(), job, status, histories, seconds: started.elapsed().as_secs_f64(), output: out.display().to_string() });
        }
    }
    print_summary(&outcomes);
    Ok(if outcomes.iter().any(|o| o.status.is_err()) { super::EXIT_FAILURE } else { 0 })
}

fn print_summary(outcomes: &[Outcome]) {
    println!();
    println!("{:<32} {:<28} {:<8} {:>12} {:>9}  output", "deck", "job", "status", "histories", "time_s");
    for o in outcomes {
        let status = if o.status.is_ok() { "ok" } else { "FAILED" };
        println!("{:<32} {:<28} {:<8} {:>12} {:>9.2}  {}", o.deck, o.job, status, o.histories, o.seconds, o.output);
    }
    let failed = outcomes.iter().filter(|o| o.status.is_err()).count();
    println!("{} job(s), {} failed", outcomes.len(), failed);
}

/// Waves of this many chunks are run between checks of a target uncertainty (a fixed number, so
/// where a run stops does not depend on the thread count).
const WAVE_CHUNKS: usize = 16;
/// Chunks per wave of a run without a target uncertainty (bounds the chunk lists in memory).
const LARGE_WAVE_CHUNKS: u64 = 4096;

fn run_job(resolved: &deck::ResolvedDeck, deck_text: &str, values: &[(String, toml::Value)], out: &Path, args: &Args) -> anyhow::Result<(u64, String)> {
    if out.exists() && !args.force {
        anyhow::bail!("{} exists; pass --force to overwrite it, or choose another --out folder", out.display());
    }
    let (problem, info) = setup::build(resolved)?;
    let settings = setup::run_settings(resolved, args.threads, args.seed, !args.quiet);
    let start_time = now_rfc3339();
    let n_chunks = crate::rng::chunk_count(settings.histories, settings.chunk_histories);

    let stop = AtomicBool::new(false);
    let bar = progress_bar(&settings, settings.histories);
    let target = resolved.run.stop_at_uncertainty.as_ref().map(|t| {
        let i = info.scores.iter().position(|s| s.name == t.score).expect("validated score name");
        (i, t.relative)
    });
    let (result, reason) = std::thread::scope(|scope| {
        let (done_tx, done_rx) = std::sync::mpsc::channel::<()>();
        if let Some(limit) = resolved.run.time_limit_s {
            let stop = &stop;
            scope.spawn(move || {
                if done_rx.recv_timeout(Duration::from_secs_f64(limit)).is_err() {
                    stop.store(true, Ordering::Relaxed);
                }
            });
        }
        // Chunks run in waves (never a list of every chunk of a huge run in memory); with a
        // target uncertainty the waves are small and fixed, and the target is checked after each.
        let wave_len = if target.is_some() { WAVE_CHUNKS as u64 } else { LARGE_WAVE_CHUNKS };
        let waves = (0..n_chunks).step_by(wave_len as usize).map(|first| (first..(first + wave_len).min(n_chunks)).collect::<Vec<u64>>());
        let outcome = match target {
            None => {
                let mut acc = RunResult::empty(&problem);
                for wave in waves {
                    let r = run_chunks_with(&problem, &settings, &wave, Some(&stop), bar.as_ref());
                    acc.merge(&r);
                    if stop.load(Ordering::Relaxed) {
                        break;
                    }
                }
                (acc, "all histories")
            }
            Some((score, relative)) => {
                let mut acc = RunResult::empty(&problem);
                let mut reason = "all histories";
                for wave in waves {
                    let r = run_chunks_with(&problem, &settings, &wave, Some(&stop), bar.as_ref());
                    acc.merge(&r);
                    if stop.load(Ordering::Relaxed) {
                        break;
                    }
                    let (mean, sigma) = acc.scorers[score].tally().mean_and_sigma(acc.histories);
                    let peak = (0..mean.len()).max_by(|&a, &b| mean[a].total_cmp(&mean[b]));
                    if let Some(p) = peak {
                        if mean[p] > 0.0 && sigma[p] / mean[p] <= relative && acc.histories > 1 {
                            reason = "target uncertainty reached";
                            break;
                        }
                    }
                }
                (acc, reason)
            }
        };
        drop(done_tx);
        outcome
    });
    if let Some(b) = &bar {
        b.finish_and_clear();
    }
    let reason = if stop.load(Ordering::Relaxed) && result.histories < settings.histories { "time limit" } else { reason };
    let meta = RunMeta {
        deck_text: deck_text.to_string(),
        resolved_deck: deck::resolved_deck_toml(resolved),
        seed: settings.seed,
        histories_requested: settings.histories,
        threads: settings.threads,
        start_time,
        completion: "complete".to_string(),
        sweep: values.iter().map(|(k, v)| (k.clone(), v.to_string())).collect(),
    };
    let mut file = result_file(&info, &result, &meta);
    file.set_attr("stop_reason", reason);
    if let Some(dir) = out.parent() {
        if !dir.as_os_str().is_empty() {
            std::fs::create_dir_all(dir)?;
        }
    }
    output::write_atomic(out, &file, args.force)?;
    Ok((result.histories, format!("{:.2} s, {reason}", result.wall_time_s)))
}

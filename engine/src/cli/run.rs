//! `dosemill run DECK...`: runs decks in turn (every sweep combination as its own job), writes
//! one HDF5 result per job, and ends with a summary table. A failing deck is reported and the
//! batch goes on; the exit code is 1 if any job failed.
//!
//! # Waves, checkpoints and interruption
//!
//! A job runs its chunks in waves of [`WAVE_CHUNKS`] chunks (a fixed number, independent of the
//! thread count). Workers keep their partial tallies across waves and merge them into the job's
//! result only when needed (integer sums: the moment changes no bit): between waves a target
//! uncertainty is checked on the merged result, and when due a checkpoint `<output>.ckpt` is written
//! atomically (see `runstate::checkpoint`): every `--checkpoint-every-chunks` chunks, every
//! `--checkpoint-every-s` seconds (default: the deck's `run.checkpoint_interval_s`, else
//! [`DEFAULT_CHECKPOINT_S`]). After a complete result is written the checkpoint is removed.
//!
//! SIGINT or SIGTERM: the workers finish the chunk in hand, a checkpoint and a result file with
//! `completion = "partial"` (scores of the histories done) are written, and the batch ends with
//! [`EXIT_INTERRUPTED`]. A second signal ends the process at once with [`EXIT_ABORTED`]; the
//! last checkpoint written stays valid. A time limit (`run.time_limit_s`) ends a job the same
//! way (partial result, checkpoint kept), without ending the batch.
//!
//! `dosemill resume CHECKPOINT` or `dosemill run DECK --resume` continue from the checkpoint;
//! the finished result holds the same bits in every dataset as an uninterrupted run.
//!
//! # Shards
//!
//! `--shard K/N` runs chunks `i` with `i mod N = K` only and writes `<output stem>.shard-K-of-N.h5`
//! with the raw sums; `dosemill merge` combines shards exactly (see `runstate::shard`).

use crate::deck;
use crate::output;
use crate::results::{now_rfc3339, result_file, RunMeta};
use crate::runstate::checkpoint::{self, Checkpoint, Header, Job};
use crate::runstate::{limits, shard, Identity, ShardSpec};
use crate::setup;
use crate::transport::{progress_bar, RunResult, Workers};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, OnceLock};
use std::time::{Duration, Instant};

/// Exit code: interrupted by SIGINT/SIGTERM; a checkpoint and a partial result were written.
pub const EXIT_INTERRUPTED: i32 = 3;
/// Exit code: a second SIGINT/SIGTERM ended the process at once (the last checkpoint stays valid).
pub const EXIT_ABORTED: i32 = 4;
/// Exit code: a job was refused because it would exceed the memory or disk limit.
pub const EXIT_TOO_LARGE: i32 = 5;
/// Checkpoint interval (s) when neither the deck nor the command line sets one.
pub const DEFAULT_CHECKPOINT_S: f64 = 600.0;
/// Waves of this many chunks are run between merges, target checks and checkpoints (a fixed
/// number, so where a run stops and what a checkpoint holds do not depend on the thread count).
pub const WAVE_CHUNKS: usize = 16;

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
    /// Overwrite existing result files (and discard an existing checkpoint).
    #[arg(long)]
    pub force: bool,
    /// Continue each job from its checkpoint `<output>.ckpt` where one exists.
    #[arg(long)]
    pub resume: bool,
    /// Write a checkpoint at least this often (seconds; default: deck `run.checkpoint_interval_s`, else 600).
    #[arg(long, value_name = "S")]
    pub checkpoint_every_s: Option<f64>,
    /// Write a checkpoint after every this many chunks (rounded up to whole waves of 16 chunks).
    #[arg(long, value_name = "N")]
    pub checkpoint_every_chunks: Option<u64>,
    /// Run only shard K of N (chunk i belongs to shard i mod N) and write a shard file for `dosemill merge`.
    #[arg(long, value_name = "K/N", value_parser = ShardSpec::parse)]
    pub shard: Option<ShardSpec>,
}

/// How jobs are run (from `run` or `resume`).
#[derive(Debug, Clone, Default)]
pub struct Options {
    /// Worker threads.
    pub threads: Option<usize>,
    /// Seed override.
    pub seed: Option<u64>,
    /// Output folder override.
    pub out: Option<PathBuf>,
    /// No progress output.
    pub quiet: bool,
    /// Overwrite outputs, discard checkpoints.
    pub force: bool,
    /// Continue from checkpoints.
    pub resume: bool,
    /// Checkpoint interval (s).
    pub checkpoint_every_s: Option<f64>,
    /// Checkpoint interval (chunks).
    pub checkpoint_every_chunks: Option<u64>,
    /// Shard to run.
    pub shard: Option<ShardSpec>,
}

impl From<&Args> for Options {
    fn from(a: &Args) -> Self {
        Options {
            threads: a.threads,
            seed: a.seed,
            out: a.out.clone(),
            quiet: a.quiet,
            force: a.force,
            resume: a.resume,
            checkpoint_every_s: a.checkpoint_every_s,
            checkpoint_every_chunks: a.checkpoint_every_chunks,
            shard: a.shard,
        }
    }
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

/// How a job ended.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum JobEnd {
    /// Every planned chunk (or the target uncertainty) was reached; the checkpoint is removed.
    Complete,
    /// The time limit ended the job; partial result and checkpoint written.
    TimeLimit,
    /// A signal ended the job; partial result and checkpoint written.
    Interrupted,
}

/// What a job did.
#[derive(Debug, Clone)]
pub struct JobReport {
    /// Histories in the result.
    pub histories: u64,
    /// How it ended.
    pub end: JobEnd,
    /// Result file written.
    pub output: PathBuf,
    /// Short note for the per-job line.
    pub note: String,
}

/// A job refused before it started because it would not fit.
#[derive(Debug, thiserror::Error)]
#[error(transparent)]
pub struct TooLarge(#[from] pub limits::LimitError);

/// Loads and validates a deck, checking built-in material names against the library.
pub fn load_deck(path: &Path) -> Result<deck::Deck, Vec<deck::DeckError>> {
    let d = deck::load(path)?;
    deck::validate_with(&d, &|name| dosemill_xsdata::library::lookup(name).map(|_| ()).map_err(|e| e.to_string()))?;
    Ok(d)
}

/// The process-wide flag set by SIGINT/SIGTERM (handlers installed on first use). A second
/// signal while the flag is set ends the process with [`EXIT_ABORTED`].
pub fn interrupt_flag() -> &'static Arc<AtomicBool> {
    static FLAG: OnceLock<Arc<AtomicBool>> = OnceLock::new();
    FLAG.get_or_init(|| {
        let flag = Arc::new(AtomicBool::new(false));
        for sig in [signal_hook::consts::SIGINT, signal_hook::consts::SIGTERM] {
            // Order matters: the conditional exit sees the flag as it was before this signal.
            if let Err(e) = signal_hook::flag::register_conditional_shutdown(sig, EXIT_ABORTED, Arc::clone(&flag)) {
                eprintln!("dosemill: warning: cannot install the signal handler ({e}); an interrupt will not save a checkpoint");
            }
            let _ = signal_hook::flag::register(sig, Arc::clone(&flag));
        }
        flag
    })
}

/// Makes writing to a closed stdout (e.g. `dosemill report x.h5 | head`) end the process
/// quietly with status 141 (128 + SIGPIPE, as the shell reports a tool killed by a closed pipe)
/// instead of printing a panic message.
pub fn quiet_on_closed_pipe() {
    let default = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        let msg = info.payload().downcast_ref::<String>().map(String::as_str).or_else(|| info.payload().downcast_ref::<&str>().copied()).unwrap_or("");
        if msg.contains("failed printing to stdout") && msg.contains("Broken pipe") {
            std::process::exit(141);
        }
        default(info);
    }));
}

/// Runs `args.decks`; returns the exit code.
pub fn run(args: Args) -> anyhow::Result<i32> {
    let options = Options::from(&args);
    run_decks(&args.decks, &options, None)
}

/// Runs decks with `options`; `only` restricts each deck to the job with those swept values.
pub fn run_decks(decks: &[PathBuf], options: &Options, only: Option<&[(String, String)]>) -> anyhow::Result<i32> {
    let interrupted = interrupt_flag();
    let mut outcomes = Vec::new();
    let mut too_large = false;
    'decks: for path in decks {
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
        let deck_path = std::path::absolute(path).unwrap_or_else(|_| path.clone());
        for (values, resolved) in deck::expand(&d) {
            let sweep: Vec<(String, String)> = values.iter().map(|(k, v)| (k.clone(), v.to_string())).collect();
            if only.is_some_and(|o| o != sweep.as_slice()) {
                continue;
            }
            if interrupted.load(Ordering::Relaxed) {
                break 'decks;
            }
            let job = if values.is_empty() { "-".to_string() } else { sweep.iter().map(|(k, v)| format!("{k}={v}")).collect::<Vec<_>>().join(" ") };
            let out = match &options.out {
                Some(dir) => dir.join(resolved.run.output.file_name().unwrap_or_default()),
                None => resolved.run.output.clone(),
            };
            let started = Instant::now();
            let result = run_job(&JobInput { deck_path: &deck_path, resolved: &resolved, deck_text: &deck_text, sweep: &sweep, out: &out }, options);
            let (status, histories, shown) = match result {
                Ok(r) => {
                    let shown = r.output.display().to_string();
                    if !options.quiet {
                        // Peak resident memory of the process so far: transport and writing.
                        let peak = super::bench::peak_rss_bytes().map(|b| format!(" (peak memory {:.3} GiB)", b as f64 / (1u64 << 30) as f64)).unwrap_or_default();
                        println!("{name} [{job}]: {} histories, {} -> {shown}{peak}", r.histories, r.note);
                    }
                    let status = match r.end {
                        JobEnd::Complete => Ok(r.note),
                        JobEnd::TimeLimit => Ok(format!("partial: {}", r.note)),
                        JobEnd::Interrupted => Err(format!("interrupted: {}", r.note)),
                    };
                    (status, r.histories, shown)
                }
                Err(e) => {
                    if e.downcast_ref::<TooLarge>().is_some() {
                        too_large = true;
                    }
                    eprintln!("dosemill: {name} [{job}]: {e:#}");
                    (Err(format!("{e:#}")), 0, out.display().to_string())
                }
            };
            outcomes.push(Outcome { deck: name.clone(), job, status, histories, seconds: started.elapsed().as_secs_f64(), output: shown });
        }
    }
    print_summary(&outcomes);
    Ok(if interrupted.load(Ordering::Relaxed) {
        eprintln!("dosemill: interrupted; a checkpoint was written: continue with `dosemill resume <output>.ckpt` (or `dosemill run DECK --resume`)");
        EXIT_INTERRUPTED
    } else if too_large {
        EXIT_TOO_LARGE
    } else if outcomes.iter().any(|o| o.status.is_err()) {
        super::EXIT_FAILURE
    } else {
        0
    })
}

fn print_summary(outcomes: &[Outcome]) {
    println!();
    println!("{:<32} {:<28} {:<8} {:>12} {:>9}  output", "deck", "job", "status", "histories", "time_s");
    for o in outcomes {
        let status = match &o.status {
            Ok(n) if n.starts_with("partial") => "partial",
            Ok(_) => "ok",
            Err(n) if n.starts_with("interrupted") => "STOPPED",
            Err(_) => "FAILED",
        };
        println!("{:<32} {:<28} {:<8} {:>12} {:>9.2}  {}", o.deck, o.job, status, o.histories, o.seconds, o.output);
    }
    let failed = outcomes.iter().filter(|o| o.status.is_err()).count();
    println!("{} job(s), {} failed or stopped", outcomes.len(), failed);
}

/// One job: a deck (or one sweep combination) and where its result goes.
pub struct JobInput<'a> {
    /// The deck file (absolute).
    pub deck_path: &'a Path,
    /// The resolved deck of this job.
    pub resolved: &'a deck::ResolvedDeck,
    /// The deck text as read.
    pub deck_text: &'a str,
    /// Swept values (key path, value as text).
    pub sweep: &'a [(String, String)],
    /// Result file (before the shard suffix).
    pub out: &'a Path,
}

fn is_partial(path: &Path) -> bool {
    output::read(path).ok().and_then(|f| f.attr("completion").and_then(|a| a.as_str()).map(|s| s == "partial")).unwrap_or(false)
}

/// Runs one job (waves, checkpoints, signals, shard, resume); see the module docs.
pub fn run_job(input: &JobInput, options: &Options) -> anyhow::Result<JobReport> {
    let resolved = input.resolved;
    let out = match options.shard {
        Some(s) => shard::path_for(input.out, s),
        None => input.out.to_path_buf(),
    };
    let ckpt_path = checkpoint::path_for(&out);
    let settings = setup::run_settings(resolved, options.threads, options.seed, !options.quiet);
    let resolved_text = deck::resolved_deck_toml(resolved);
    let identity = Identity::of(&resolved_text, &settings);
    if options.shard.is_some() && resolved.run.stop_at_uncertainty.is_some() {
        anyhow::bail!("run.stop_at_uncertainty cannot be used with --shard (where to stop depends on all shards together); remove it from the deck or run without --shard");
    }

    // Resume or start afresh; never overwrite silently.
    let saved = if options.resume && ckpt_path.exists() {
        let c = Checkpoint::read_header(&ckpt_path)?;
        c.check_identity(&identity, &ckpt_path)?;
        if c.header.job.shard != options.shard {
            anyhow::bail!("{}: checkpoint of {} but this job is {}", ckpt_path.display(), shard_text(c.header.job.shard), shard_text(options.shard));
        }
        Some(c)
    } else {
        if ckpt_path.exists() && !options.force {
            anyhow::bail!("{} exists (an unfinished run of this job); continue it with `dosemill resume {}` or `dosemill run --resume`, or pass --force to start over", ckpt_path.display(), ckpt_path.display());
        }
        None
    };
    if out.exists() && !options.force && !(saved.is_some() && is_partial(&out)) {
        anyhow::bail!("{} exists; pass --force to overwrite it, or choose another --out folder", out.display());
    }
    let out_dir = out.parent().map(Path::to_path_buf).unwrap_or_default();
    limits::check_with(resolved, settings.threads, &out_dir, options.shard.is_some()).map_err(TooLarge)?;

    let (problem, info) = setup::build(resolved)?;
    let n_chunks = crate::rng::chunk_count(settings.histories, settings.chunk_histories);
    let plan: Vec<u64> = match options.shard {
        Some(s) => s.chunks(n_chunks),
        None => (0..n_chunks).collect(),
    };
    let (mut acc, start_time) = match &saved {
        Some(c) => {
            let (h, r) = Checkpoint::load_result(&problem, &ckpt_path)?;
            if h != c.header {
                anyhow::bail!("{}: the checkpoint changed while it was being read; run again", ckpt_path.display());
            }
            if let Some(bad) = r.chunks.iter().find(|ch| plan.binary_search(ch).is_err()) {
                anyhow::bail!("{}: holds chunk {bad}, which this job does not run", ckpt_path.display());
            }
            (r, c.header.start_time.clone())
        }
        None => (RunResult::empty(&problem), now_rfc3339()),
    };
    let wall_before = acc.wall_time_s;
    let header = |histories_done: u64, wall_time_s: f64| Header {
        format: 1,
        identity: identity.clone(),
        job: Job {
            deck_path: input.deck_path.to_path_buf(),
            sweep: input.sweep.to_vec(),
            output: input.out.to_path_buf(),
            seed_override: options.seed,
            threads: options.threads,
            shard: options.shard,
        },
        start_time: start_time.clone(),
        histories_done,
        wall_time_s,
    };
    let every_s = options.checkpoint_every_s.or(resolved.run.checkpoint_interval_s).unwrap_or(DEFAULT_CHECKPOINT_S);
    let every_chunks = options.checkpoint_every_chunks.unwrap_or(u64::MAX);
    if let Some(dir) = out.parent() {
        if !dir.as_os_str().is_empty() {
            std::fs::create_dir_all(dir)?;
        }
    }

    let interrupted = interrupt_flag();
    let stop = AtomicBool::new(false);
    let timed_out = AtomicBool::new(false);
    let target = resolved.run.stop_at_uncertainty.as_ref().map(|t| {
        let i = info.scores.iter().position(|s| s.name == t.score).expect("validated score name");
        (i, t.relative)
    });
    let session = Instant::now();
    let mut reason = "all histories";
    let mut warnings = Vec::new();
    std::thread::scope(|scope| {
        let (done_tx, done_rx) = std::sync::mpsc::channel::<()>();
        {
            let (stop, timed_out) = (&stop, &timed_out);
            let limit = resolved.run.time_limit_s.map(Duration::from_secs_f64);
            scope.spawn(move || loop {
                match done_rx.recv_timeout(Duration::from_millis(50)) {
                    Err(std::sync::mpsc::RecvTimeoutError::Timeout) => {}
                    _ => break,
                }
                if interrupted.load(Ordering::Relaxed) {
                    stop.store(true, Ordering::Relaxed);
                }
                if limit.is_some_and(|l| session.elapsed() >= l) {
                    timed_out.store(true, Ordering::Relaxed);
                    stop.store(true, Ordering::Relaxed);
                }
            });
        }
        let mut last_ckpt = Instant::now();
        let mut chunks_since = 0u64;
        let remaining: u64 = settings.histories.saturating_sub(acc.histories);
        let bar = progress_bar(&settings, remaining);
        // The workers keep their partial tallies across waves; they are gathered into `acc`
        // only for a target-uncertainty check, a checkpoint and at the end.
        let mut workers = Workers::new(settings.threads, &acc);
        for wave in plan.chunks(WAVE_CHUNKS) {
            let todo: Vec<u64> = wave.iter().copied().filter(|c| acc.chunks.binary_search(c).is_err()).collect();
            if todo.is_empty() {
                continue;
            }
            if stop.load(Ordering::Relaxed) || interrupted.load(Ordering::Relaxed) {
                break;
            }
            let before = workers.pending_chunks();
            workers.run(&problem, &settings, &todo, Some(&stop), bar.as_ref());
            chunks_since += (workers.pending_chunks() - before) as u64;
            if stop.load(Ordering::Relaxed) {
                break;
            }
            if let Some((score, relative)) = target {
                workers.gather(&mut acc);
                let (mean, sigma) = acc.scorers[score].tally().mean_and_sigma(acc.histories);
                let peak = (0..mean.len()).max_by(|&a, &b| mean[a].total_cmp(&mean[b]));
                if let Some(p) = peak {
                    if mean[p] > 0.0 && sigma[p] / mean[p] <= relative && acc.histories > 1 {
                        reason = "target uncertainty reached";
                        break;
                    }
                }
            }
            let more = acc.chunks.len() + workers.pending_chunks() < plan.len();
            if more && (chunks_since >= every_chunks || last_ckpt.elapsed().as_secs_f64() >= every_s) {
                workers.gather(&mut acc);
                if let Err(e) = Checkpoint::write_result(&header(acc.histories, wall_before + session.elapsed().as_secs_f64()), &acc, &ckpt_path) {
                    eprintln!("dosemill: warning: {}: {e}", ckpt_path.display());
                    warnings.push("a checkpoint could not be written".to_string());
                }
                last_ckpt = Instant::now();
                chunks_since = 0;
            }
        }
        workers.gather(&mut acc);
        if let Some(b) = bar {
            b.finish_and_clear();
        }
        drop(done_tx);
    });
    acc.wall_time_s = wall_before + session.elapsed().as_secs_f64();
    let finished = reason == "target uncertainty reached" || acc.chunks.len() == plan.len();
    let end = if finished {
        JobEnd::Complete
    } else if interrupted.load(Ordering::Relaxed) {
        reason = "interrupted";
        JobEnd::Interrupted
    } else if timed_out.load(Ordering::Relaxed) {
        reason = "time limit";
        JobEnd::TimeLimit
    } else {
        reason = "stopped";
        JobEnd::Interrupted
    };
    if end != JobEnd::Complete {
        // The checkpoint first: it is what a later resume needs.
        Checkpoint::write_result(&header(acc.histories, acc.wall_time_s), &acc, &ckpt_path).map_err(|e| anyhow::anyhow!("{}: {e}", ckpt_path.display()))?;
    }
    let meta = RunMeta {
        deck_text: input.deck_text.to_string(),
        resolved_deck: resolved_text.clone(),
        seed: settings.seed,
        histories_requested: settings.histories,
        threads: settings.threads,
        start_time: start_time.clone(),
        completion: if end == JobEnd::Complete { "complete" } else { "partial" }.to_string(),
        sweep: input.sweep.to_vec(),
    };
    let mut file = result_file(&info, &acc, &meta);
    file.set_attr("stop_reason", reason);
    if let Some(s) = options.shard {
        let names: Vec<String> = info.scores.iter().map(|s| s.name.clone()).collect();
        shard::add_shard_state(&mut file, &identity, s, &acc, &names);
    }
    // Overwriting was checked before the run started (absent, --force, or our own partial result).
    output::write_atomic(&out, &file, true).map_err(|e| match end {
        JobEnd::Complete => anyhow::anyhow!("{e}; the previous result file (if any) is unchanged{}", if ckpt_path.exists() { format!(" and the last checkpoint {} is kept: free space, then `dosemill resume` it", ckpt_path.display()) } else { String::new() }),
        _ => anyhow::anyhow!("{e}; the checkpoint {} was written: free space, then `dosemill resume` it", ckpt_path.display()),
    })?;
    if end == JobEnd::Complete && ckpt_path.exists() {
        std::fs::remove_file(&ckpt_path).map_err(|e| anyhow::anyhow!("{}: cannot remove the checkpoint of the finished run: {e}", ckpt_path.display()))?;
    }
    let mut note = format!("{:.2} s, {reason}", acc.wall_time_s);
    if saved.is_some() {
        note.push_str(", resumed");
    }
    for w in warnings {
        note.push_str(&format!(", {w}"));
    }
    if end != JobEnd::Complete {
        note.push_str(&format!(", checkpoint {}", ckpt_path.display()));
    }
    Ok(JobReport { histories: acc.histories, end, output: out, note })
}

fn shard_text(s: Option<ShardSpec>) -> String {
    match s {
        Some(s) => format!("shard {}/{}", s.index, s.count),
        None => "a whole run".to_string(),
    }
}

//! Shard results: one machine's share of a run, with the raw sums needed to merge exactly.
//!
//! # Assignment
//!
//! A run of `histories` histories has `ceil(histories / histories_per_chunk)` chunks, numbered
//! from 0 (see `rng::chunk_range`). Shard `K` of `N` runs chunk `i` exactly when `i mod N = K`
//! (round robin, so shards get equal work to within one chunk even when histories per chunk
//! vary in cost along the run).
//!
//! # File
//!
//! A shard file `<output stem>.shard-K-of-N.h5` is an ordinary result file of the shard's own
//! histories plus a top-level group [`GROUP`] (`kind = "shard_state"`) holding:
//!
//! * attributes `deck_sha256`, `seed`, `histories` (whole run), `histories_per_chunk`,
//!   `data_tables_sha256`, `dosemill_version`, `shard_index`, `shard_count`, `assignment`;
//! * dataset `chunks` (u64): the chunks this shard completed, ascending;
//! * one sub-group `tally_<i>` per score (deck order, attribute `score` = its name) with u64
//!   datasets `sum_lo`, `sum_hi`, `sum2_lo`, `sum2_hi`: the low and high 64 bits of each bin's
//!   128-bit fixed-point sum and sum of squares.

use super::{describe_chunks, Identity, ShardSpec};
use crate::output::{AttrValue, DataBuf, Dataset, Group, Produced, ResultFile};
use crate::transport::{Problem, RunResult};
use std::path::{Path, PathBuf};

/// Name of the group holding a shard's state.
pub const GROUP: &str = "dosemill_shard";

/// The shard file for result file `output`: `<stem>.shard-K-of-N.h5` beside it.
pub fn path_for(output: &Path, shard: ShardSpec) -> PathBuf {
    let stem = output.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "result".into());
    output.with_file_name(format!("{stem}.shard-{}-of-{}.h5", shard.index, shard.count))
}

fn u64s(name: &str, v: Vec<u64>) -> Dataset {
    let n = v.len();
    Dataset::new(name, &[n], DataBuf::U64(v), "1")
}

/// Adds the shard group to the result file `file` of shard `shard` of the run `identity`.
pub fn add_shard_state(file: &mut ResultFile, identity: &Identity, shard: ShardSpec, result: &RunResult, score_names: &[String]) {
    let mut g = Group::with_kind(GROUP, "shard_state");
    g.set_attr("deck_sha256", identity.deck_sha256.as_str());
    g.set_attr("seed", identity.seed);
    g.set_attr("histories", identity.histories);
    g.set_attr("histories_per_chunk", identity.chunk_histories);
    g.set_attr("data_tables_sha256", identity.data_tables_sha256.as_str());
    g.set_attr("dosemill_version", identity.dosemill_version.as_str());
    g.set_attr("shard_index", shard.index);
    g.set_attr("shard_count", shard.count);
    g.set_attr("assignment", "chunk i belongs to shard i mod shard_count");
    g.add_dataset(u64s("chunks", result.chunks.clone()));
    for (i, s) in result.scorers.iter().enumerate() {
        // The four word arrays are produced block by block from the tally while the file is
        // written (no copy of a large grid's sums).
        let raw = s.tally().raw_source();
        let n = raw.len();
        let mut t = Group::new(&format!("tally_{i}"));
        t.set_attr("score", score_names.get(i).map(String::as_str).unwrap_or(""));
        let words = |name: &str, word: fn((u128, u128)) -> u64| {
            let raw = raw.clone();
            Dataset::new(name, &[n], DataBuf::Produced(Produced::new_u64(n, move |start, out| {
                for (k, o) in out.iter_mut().enumerate() {
                    *o = word(raw.get(start + k));
                }
            })), "1")
        };
        t.add_dataset(words("sum_lo", |(a, _)| a as u64));
        t.add_dataset(words("sum_hi", |(a, _)| (a >> 64) as u64));
        t.add_dataset(words("sum2_lo", |(_, b)| b as u64));
        t.add_dataset(words("sum2_hi", |(_, b)| (b >> 64) as u64));
        g.add_group(t);
    }
    file.add_group(g);
}

/// A shard read back.
#[derive(Debug, Clone)]
pub struct ShardFile {
    /// The file.
    pub path: PathBuf,
    /// The run it belongs to.
    pub identity: Identity,
    /// Its place among the shards.
    pub shard: ShardSpec,
    /// Chunks it completed.
    pub chunks: Vec<u64>,
    /// Raw tally sums, deck order (read from the file block by block).
    pub tallies: Vec<ShardTally>,
    /// The whole file (root attributes are reused by the merge).
    pub file: ResultFile,
}

/// The raw sums of one score in a shard file: its four word arrays, held lazily for large
/// grids (see `output::read`).
#[derive(Debug, Clone)]
pub struct ShardTally {
    words: [DataBuf; 4],
}

impl ShardTally {
    /// Number of bins.
    pub fn len(&self) -> usize {
        self.words[0].len()
    }

    /// True without bins.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Calls `f(start, sums, sums_of_squares)` for consecutive blocks of the raw 128-bit sums.
    pub fn for_each_block(&self, mut f: impl FnMut(usize, &[u128], &[u128])) {
        let n = self.len();
        let block = Produced::BLOCK.min(n.max(1));
        let mut w = [vec![0u64; block], vec![0u64; block], vec![0u64; block], vec![0u64; block]];
        let (mut a, mut b) = (vec![0u128; block], vec![0u128; block]);
        let mut start = 0;
        while start < n {
            let k = block.min(n - start);
            for (d, buf) in self.words.iter().zip(w.iter_mut()) {
                match d {
                    DataBuf::U64(v) => buf[..k].copy_from_slice(&v[start..start + k]),
                    DataBuf::Produced(p) => {
                        let ok = p.fill_u64(start, &mut buf[..k]);
                        debug_assert!(ok, "checked when read");
                    }
                    _ => unreachable!("checked when read"),
                }
            }
            for j in 0..k {
                a[j] = (w[0][j] as u128) | ((w[1][j] as u128) << 64);
                b[j] = (w[2][j] as u128) | ((w[3][j] as u128) << 64);
            }
            f(start, &a[..k], &b[..k]);
            start += k;
        }
    }
}

/// Why shards cannot be merged.
#[derive(Debug, thiserror::Error)]
pub enum MergeError {
    /// A file is not a shard file.
    #[error("{path}: not a shard result file: {what} (shard files are written by `dosemill run DECK --shard K/N`)")]
    NotShard {
        /// The file.
        path: PathBuf,
        /// What is missing.
        what: String,
    },
    /// Shards of different runs.
    #[error("{path} belongs to a different run than {first}; differs in: {}", .differences.join("; "))]
    Mismatch {
        /// The odd file.
        path: PathBuf,
        /// The first shard given.
        first: PathBuf,
        /// What differs.
        differences: Vec<String>,
    },
    /// Chunks that no shard holds.
    #[error("chunks missing: {chunks} ({count} of {total} chunks are in no shard given); run the missing shards (e.g. {hint}) and merge again")]
    Missing {
        /// The missing chunks, compact.
        chunks: String,
        /// How many.
        count: usize,
        /// Chunks in the run.
        total: u64,
        /// A suggestion of the shards to run.
        hint: String,
    },
    /// Chunks held by more than one shard.
    #[error("chunks held more than once: {chunks} (in {files}); give each shard file once")]
    Duplicated {
        /// The duplicated chunks, compact.
        chunks: String,
        /// Files holding them.
        files: String,
    },
    /// No shards given.
    #[error("no shard files given")]
    Empty,
    /// Reading failed.
    #[error(transparent)]
    Output(#[from] crate::output::OutputError),
}

fn attr_str(g: &Group, name: &str, path: &Path) -> Result<String, MergeError> {
    g.attr(name).and_then(AttrValue::as_str).map(str::to_string).ok_or_else(|| MergeError::NotShard { path: path.into(), what: format!("attribute {GROUP}/{name} missing") })
}

fn attr_u64(g: &Group, name: &str, path: &Path) -> Result<u64, MergeError> {
    match g.attr(name) {
        Some(AttrValue::U64(v)) => Ok(*v),
        Some(AttrValue::I64(v)) if *v >= 0 => Ok(*v as u64),
        _ => Err(MergeError::NotShard { path: path.into(), what: format!("attribute {GROUP}/{name} missing") }),
    }
}

fn data_u64(g: &Group, name: &str, path: &Path) -> Result<Vec<u64>, MergeError> {
    match g.dataset(name).map(|d| &d.data) {
        Some(DataBuf::U64(v)) => Ok(v.clone()),
        Some(DataBuf::Produced(p)) if p.is_u64() => Ok(p.to_u64_vec().unwrap_or_default()),
        _ => Err(MergeError::NotShard { path: path.into(), what: format!("dataset {}/{name} missing or not u64", g.name) }),
    }
}

/// A u64 word array of a shard tally, as read (in memory or lazy).
fn words_u64(g: &Group, name: &str, path: &Path) -> Result<DataBuf, MergeError> {
    match g.dataset(name).map(|d| &d.data) {
        Some(d @ DataBuf::U64(_)) => Ok(d.clone()),
        Some(d @ DataBuf::Produced(p)) if p.is_u64() => Ok(d.clone()),
        _ => Err(MergeError::NotShard { path: path.into(), what: format!("dataset {}/{name} missing or not u64", g.name) }),
    }
}

impl ShardFile {
    /// Reads a shard file.
    pub fn read(path: &Path) -> Result<Self, MergeError> {
        let file = crate::output::read(path)?;
        let g = file.group(GROUP).ok_or_else(|| MergeError::NotShard { path: path.into(), what: format!("no group `{GROUP}`") })?;
        let identity = Identity {
            deck_sha256: attr_str(g, "deck_sha256", path)?,
            seed: attr_u64(g, "seed", path)?,
            histories: attr_u64(g, "histories", path)?,
            chunk_histories: attr_u64(g, "histories_per_chunk", path)?,
            data_tables_sha256: attr_str(g, "data_tables_sha256", path)?,
            dosemill_version: attr_str(g, "dosemill_version", path)?,
        };
        let shard = ShardSpec { index: attr_u64(g, "shard_index", path)?, count: attr_u64(g, "shard_count", path)? };
        let chunks = data_u64(g, "chunks", path)?;
        let mut tallies = Vec::new();
        for i in 0.. {
            let Some(t) = g.group(&format!("tally_{i}")) else { break };
            let words = [words_u64(t, "sum_lo", path)?, words_u64(t, "sum_hi", path)?, words_u64(t, "sum2_lo", path)?, words_u64(t, "sum2_hi", path)?];
            if words.iter().any(|w| w.len() != words[0].len()) {
                return Err(MergeError::NotShard { path: path.into(), what: format!("tally_{i}: its word arrays differ in length") });
            }
            tallies.push(ShardTally { words });
        }
        Ok(ShardFile { path: path.into(), identity, shard, chunks, tallies, file })
    }
}

/// Checks that `shards` are parts of one run covering every chunk exactly once; returns the
/// run's identity and the sorted chunk list.
pub fn check_cover(shards: &[ShardFile]) -> Result<(Identity, Vec<u64>), MergeError> {
    let first = shards.first().ok_or(MergeError::Empty)?;
    for s in &shards[1..] {
        let differences = first.identity.differences(&s.identity);
        if !differences.is_empty() {
            return Err(MergeError::Mismatch { path: s.path.clone(), first: first.path.clone(), differences });
        }
    }
    let id = first.identity.clone();
    let total = crate::rng::chunk_count(id.histories, id.chunk_histories);
    let mut seen = vec![0u32; total as usize];
    let mut dup = Vec::new();
    let mut dup_files = std::collections::BTreeSet::new();
    for s in shards {
        for &c in &s.chunks {
            if c >= total {
                return Err(MergeError::NotShard { path: s.path.clone(), what: format!("chunk {c} is outside the run (it has {total} chunks)") });
            }
            seen[c as usize] += 1;
            if seen[c as usize] == 2 {
                dup.push(c);
            }
        }
    }
    if !dup.is_empty() {
        dup.sort_unstable();
        for s in shards {
            if s.chunks.iter().any(|c| dup.binary_search(c).is_ok()) {
                dup_files.insert(s.path.display().to_string());
            }
        }
        return Err(MergeError::Duplicated { chunks: describe_chunks(&dup, 8), files: dup_files.into_iter().collect::<Vec<_>>().join(", ") });
    }
    let missing: Vec<u64> = (0..total).filter(|&c| seen[c as usize] == 0).collect();
    if !missing.is_empty() {
        let n = first.shard.count;
        let mut want: Vec<u64> = missing.iter().map(|c| c % n).collect();
        want.sort_unstable();
        want.dedup();
        let hint = want.iter().take(4).map(|k| format!("--shard {k}/{n}")).collect::<Vec<_>>().join(", ");
        return Err(MergeError::Missing { chunks: describe_chunks(&missing, 8), count: missing.len(), total, hint });
    }
    Ok((id, (0..total).collect()))
}

/// Merges the raw sums of `shards` (already checked with [`check_cover`]) into a run result of
/// `problem`.
pub fn merge_results(problem: &Problem, shards: &[ShardFile]) -> Result<RunResult, MergeError> {
    let mut acc = RunResult::empty(problem);
    for s in shards {
        if s.tallies.len() != acc.scorers.len() {
            return Err(MergeError::NotShard { path: s.path.clone(), what: format!("{} tallies, the deck has {} scores", s.tallies.len(), acc.scorers.len()) });
        }
        for (i, (sc, t)) in acc.scorers.iter().zip(&s.tallies).enumerate() {
            if sc.tally().len() != t.len() {
                return Err(MergeError::NotShard { path: s.path.clone(), what: format!("tally_{i} has {} bins, the deck gives {}", t.len(), sc.tally().len()) });
            }
        }
        // Block by block into the accumulating tallies: integer sums, so the order of shards
        // and blocks does not change a bit, and no shard's sums are held whole.
        for (sc, t) in acc.scorers.iter_mut().zip(&s.tallies) {
            let tally = sc.tally_mut();
            t.for_each_block(|start, a, b| tally.add_raw_at(start, a, b));
        }
        acc.histories += s.chunks.iter().map(|&c| {
            let r = crate::rng::chunk_range(c, s.identity.chunk_histories, s.identity.histories);
            r.end - r.start
        }).sum::<u64>();
        acc.chunks.extend_from_slice(&s.chunks);
        acc.wall_time_s += s.file.attr("wall_time_s").and_then(AttrValue::as_f64).unwrap_or(0.0);
    }
    acc.chunks.sort_unstable();
    Ok(acc)
}

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
use crate::output::{AttrValue, DataBuf, Dataset, Group, ResultFile};
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
        let (sum, sum2) = s.tally().raw();
        let mut t = Group::new(&format!("tally_{i}"));
        t.set_attr("score", score_names.get(i).map(String::as_str).unwrap_or(""));
        t.add_dataset(u64s("sum_lo", sum.iter().map(|v| *v as u64).collect()));
        t.add_dataset(u64s("sum_hi", sum.iter().map(|v| (*v >> 64) as u64).collect()));
        t.add_dataset(u64s("sum2_lo", sum2.iter().map(|v| *v as u64).collect()));
        t.add_dataset(u64s("sum2_hi", sum2.iter().map(|v| (*v >> 64) as u64).collect()));
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
    /// Raw tally sums, deck order.
    pub tallies: Vec<(Vec<u128>, Vec<u128>)>,
    /// The whole file (root attributes are reused by the merge).
    pub file: ResultFile,
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
            let join = |lo: Vec<u64>, hi: Vec<u64>| -> Result<Vec<u128>, MergeError> {
                if lo.len() != hi.len() {
                    return Err(MergeError::NotShard { path: path.into(), what: format!("tally_{i}: low and high words differ in length") });
                }
                Ok(lo.iter().zip(&hi).map(|(l, h)| (*l as u128) | ((*h as u128) << 64)).collect())
            };
            let sum = join(data_u64(t, "sum_lo", path)?, data_u64(t, "sum_hi", path)?)?;
            let sum2 = join(data_u64(t, "sum2_lo", path)?, data_u64(t, "sum2_hi", path)?)?;
            tallies.push((sum, sum2));
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
        let mut part = RunResult::empty(problem);
        for (i, (sc, (sum, sum2))) in part.scorers.iter_mut().zip(&s.tallies).enumerate() {
            if sc.tally().len() != sum.len() || sum.len() != sum2.len() {
                return Err(MergeError::NotShard { path: s.path.clone(), what: format!("tally_{i} has {} bins, the deck gives {}", sum.len(), sc.tally().len()) });
            }
            sc.tally_mut().load_raw(sum, sum2);
        }
        part.histories = s.chunks.iter().map(|&c| {
            let r = crate::rng::chunk_range(c, s.identity.chunk_histories, s.identity.histories);
            r.end - r.start
        }).sum();
        part.chunks = s.chunks.clone();
        part.wall_time_s = s.file.attr("wall_time_s").and_then(AttrValue::as_f64).unwrap_or(0.0);
        acc.merge(&part);
    }
    Ok(acc)
}

//! Run state that outlives a process: checkpoints of an unfinished run, shard results of a run
//! split over machines, and the resource estimate made before a run starts.
//!
//! Every saved state carries the run's [`Identity`]: what must be equal for two partial results
//! to belong to the same run (resolved deck, seed, history count, chunk size, interaction data,
//! program version). Scores are saved as the raw 128-bit fixed-point sums of the tallies, so
//! resuming or merging reproduces a single uninterrupted run bit for bit.

pub mod checkpoint;
pub mod limits;
pub mod shard;

use crate::transport::RunSettings;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

/// SHA-256 of `bytes`, lower-case hex.
pub fn sha256_hex(bytes: &[u8]) -> String {
    let d = Sha256::digest(bytes);
    d.iter().map(|b| format!("{b:02x}")).collect()
}

/// What makes two partial results parts of the same run.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Identity {
    /// SHA-256 of the resolved deck text (every default explicit, paths absolute).
    pub deck_sha256: String,
    /// Run seed.
    pub seed: u64,
    /// Histories of the whole run.
    pub histories: u64,
    /// Histories per chunk.
    pub chunk_histories: u64,
    /// SHA-256 of the interaction data tables.
    pub data_tables_sha256: String,
    /// Version of the program.
    pub dosemill_version: String,
}

impl Identity {
    /// The identity of a run of the resolved deck text `resolved_deck` with `settings`.
    pub fn of(resolved_deck: &str, settings: &RunSettings) -> Self {
        Identity {
            deck_sha256: sha256_hex(resolved_deck.as_bytes()),
            seed: settings.seed,
            histories: settings.histories,
            chunk_histories: settings.chunk_histories,
            data_tables_sha256: dosemill_xsdata::elements().provenance().tables_sha256.clone(),
            dosemill_version: env!("CARGO_PKG_VERSION").to_string(),
        }
    }

    /// Human-readable list of what differs between `self` (the saved state) and `other` (the
    /// current run); empty when they are the same run.
    pub fn differences(&self, other: &Identity) -> Vec<String> {
        let mut d = Vec::new();
        let short = |s: &str| s.chars().take(12).collect::<String>();
        if self.deck_sha256 != other.deck_sha256 {
            d.push(format!("deck (resolved deck sha256 {}… here, {}… now: the deck or a file it uses was changed)", short(&self.deck_sha256), short(&other.deck_sha256)));
        }
        if self.seed != other.seed {
            d.push(format!("seed ({} here, {} now)", self.seed, other.seed));
        }
        if self.histories != other.histories {
            d.push(format!("histories ({} here, {} now)", self.histories, other.histories));
        }
        if self.chunk_histories != other.chunk_histories {
            d.push(format!("histories_per_chunk ({} here, {} now)", self.chunk_histories, other.chunk_histories));
        }
        if self.data_tables_sha256 != other.data_tables_sha256 {
            d.push(format!("interaction data (tables sha256 {}… here, {}… now)", short(&self.data_tables_sha256), short(&other.data_tables_sha256)));
        }
        if self.dosemill_version != other.dosemill_version {
            d.push(format!("dosemill version ({} here, {} now)", self.dosemill_version, other.dosemill_version));
        }
        d
    }
}

/// Which part of the chunk sequence a process runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct ShardSpec {
    /// This shard's index, 0 ≤ `index` < `count`.
    pub index: u64,
    /// Number of shards.
    pub count: u64,
}

impl ShardSpec {
    /// Parses `K/N` (0 ≤ K < N).
    pub fn parse(s: &str) -> Result<Self, String> {
        let (k, n) = s.split_once('/').ok_or_else(|| format!("`{s}`: expected K/N, e.g. --shard 0/4"))?;
        let index: u64 = k.trim().parse().map_err(|_| format!("`{s}`: shard index `{k}` is not a whole number"))?;
        let count: u64 = n.trim().parse().map_err(|_| format!("`{s}`: shard count `{n}` is not a whole number"))?;
        if count == 0 || index >= count {
            return Err(format!("`{s}`: need 0 ≤ K < N (shards are numbered 0 to N-1)"));
        }
        Ok(ShardSpec { index, count })
    }

    /// The chunks of a run of `n_chunks` chunks this shard runs: chunk i goes to shard i mod N.
    pub fn chunks(&self, n_chunks: u64) -> Vec<u64> {
        (self.index..n_chunks).step_by(self.count as usize).collect()
    }
}

/// Compact text of a sorted list of chunk numbers, e.g. `0-3, 7, 9-12` (at most `max` items).
pub fn describe_chunks(chunks: &[u64], max: usize) -> String {
    let mut parts = Vec::new();
    let mut i = 0;
    while i < chunks.len() {
        let mut j = i;
        while j + 1 < chunks.len() && chunks[j + 1] == chunks[j] + 1 {
            j += 1;
        }
        parts.push(if i == j { chunks[i].to_string() } else { format!("{}-{}", chunks[i], chunks[j]) });
        i = j + 1;
    }
    if parts.len() > max {
        let more = parts.len() - max;
        parts.truncate(max);
        parts.push(format!("… ({more} more ranges)"));
    }
    parts.join(", ")
}

//! Checkpoint files (`<output>.ckpt`): the state of an unfinished run, enough to continue it.
//!
//! # Format (version 1)
//!
//! A small binary file of our own, little-endian throughout:
//!
//! | bytes        | content |
//! |--------------|---------|
//! | 8            | magic `DMCKPT01` |
//! | 8            | u64 length `h` of the header |
//! | `h`          | header, UTF-8 JSON ([`Header`]: identity, job, progress) |
//! | 8            | u64 number of tallies `t` (one per score, deck order) |
//! | per tally    | u64 bins `b`, then `b` u128 sums, then `b` u128 sums of squares |
//! | 8            | u64 number of completed chunks `c` |
//! | 8·`c`        | the completed chunk numbers, ascending |
//! | 32           | SHA-256 of every byte before it |
//!
//! The file is written to a temporary file, flushed to disk and renamed over the previous
//! checkpoint, so a crash at any moment leaves either the old or the new checkpoint, whole.

use super::{Identity, ShardSpec};
use crate::transport::{Problem, RunResult};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

const MAGIC: &[u8; 8] = b"DMCKPT01";

/// The checkpoint beside a result file: `<output>.ckpt` (e.g. `water.h5.ckpt`).
pub fn path_for(output: &Path) -> PathBuf {
    let mut s = output.as_os_str().to_owned();
    s.push(".ckpt");
    PathBuf::from(s)
}

/// Which job of which deck a checkpoint belongs to, and how it was started.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Job {
    /// The deck file (absolute path).
    pub deck_path: PathBuf,
    /// Swept values of this job (key path, value as deck text); empty without a sweep.
    pub sweep: Vec<(String, String)>,
    /// Result file the job writes.
    pub output: PathBuf,
    /// `--seed` given on the command line.
    pub seed_override: Option<u64>,
    /// `--threads` given on the command line.
    pub threads: Option<usize>,
    /// `--shard K/N`, if this job is one shard.
    pub shard: Option<ShardSpec>,
}

/// The JSON header of a checkpoint.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Header {
    /// Format version (1).
    pub format: u32,
    /// The run this belongs to.
    pub identity: Identity,
    /// The job.
    pub job: Job,
    /// Start of the run, RFC 3339 UTC.
    pub start_time: String,
    /// Histories completed.
    pub histories_done: u64,
    /// Wall time spent so far (s, summed over sessions).
    pub wall_time_s: f64,
}

/// A run's saved state.
#[derive(Debug, Clone, PartialEq)]
pub struct Checkpoint {
    /// Identity, job and progress.
    pub header: Header,
    /// Raw sums and sums of squares of each tally.
    pub tallies: Vec<(Vec<u128>, Vec<u128>)>,
    /// Completed chunks, ascending.
    pub chunks: Vec<u64>,
}

/// A checkpoint that cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum CheckpointError {
    /// Reading failed.
    #[error("{path}: cannot read checkpoint: {source}")]
    Io {
        /// The checkpoint file.
        path: PathBuf,
        /// Underlying error.
        #[source]
        source: std::io::Error,
    },
    /// The bytes are not a whole checkpoint of this format.
    #[error("{path}: not a usable dosemill checkpoint: {what}")]
    Corrupt {
        /// The checkpoint file.
        path: PathBuf,
        /// What is wrong.
        what: String,
    },
    /// The checkpoint belongs to another run.
    #[error("{path}: checkpoint belongs to a different run; differs in: {}. Start afresh (delete the checkpoint, or run without --resume) or restore the original deck/data/program", .differences.join("; "))]
    Mismatch {
        /// The checkpoint file.
        path: PathBuf,
        /// What differs.
        differences: Vec<String>,
    },
    /// Writing failed (the previous checkpoint is left as it was).
    #[error("cannot write checkpoint (the previous checkpoint is kept): {0}")]
    Write(#[from] crate::output::OutputError),
}

impl Checkpoint {
    /// The state of `result` (flushed tallies) for `header`.
    pub fn from_result(header: Header, result: &RunResult) -> Self {
        let tallies = result.scorers.iter().map(|s| {
            let (a, b) = s.tally().raw();
            (a.into_owned(), b.into_owned())
        }).collect();
        Checkpoint { header, tallies, chunks: result.chunks.clone() }
    }

    /// The saved state as a run result of `problem`; fails if the tally shapes differ.
    pub fn to_result(&self, problem: &Problem, path: &Path) -> Result<RunResult, CheckpointError> {
        let mut r = RunResult::empty(problem);
        if r.scorers.len() != self.tallies.len() {
            return Err(CheckpointError::Corrupt { path: path.into(), what: format!("{} tallies saved, the deck has {} scores", self.tallies.len(), r.scorers.len()) });
        }
        for (i, (s, (sum, sum2))) in r.scorers.iter_mut().zip(&self.tallies).enumerate() {
            if s.tally().len() != sum.len() {
                return Err(CheckpointError::Corrupt { path: path.into(), what: format!("score {i}: {} bins saved, the deck gives {}", sum.len(), s.tally().len()) });
            }
            s.tally_mut().load_raw(sum, sum2);
        }
        r.histories = self.header.histories_done;
        r.chunks = self.chunks.clone();
        r.wall_time_s = self.header.wall_time_s;
        Ok(r)
    }

    /// Encodes the checkpoint (format above).
    pub fn encode(&self) -> Vec<u8> {
        let header = serde_json::to_vec(&self.header).expect("header serialises");
        let bins: usize = self.tallies.iter().map(|t| t.0.len()).sum();
        let mut out = Vec::with_capacity(64 + header.len() + bins * 32 + self.chunks.len() * 8);
        out.extend_from_slice(MAGIC);
        out.extend_from_slice(&(header.len() as u64).to_le_bytes());
        out.extend_from_slice(&header);
        out.extend_from_slice(&(self.tallies.len() as u64).to_le_bytes());
        for (sum, sum2) in &self.tallies {
            out.extend_from_slice(&(sum.len() as u64).to_le_bytes());
            for v in sum.iter().chain(sum2) {
                out.extend_from_slice(&v.to_le_bytes());
            }
        }
        out.extend_from_slice(&(self.chunks.len() as u64).to_le_bytes());
        for c in &self.chunks {
            out.extend_from_slice(&c.to_le_bytes());
        }
        let digest = Sha256::digest(&out);
        out.extend_from_slice(&digest);
        out
    }

    /// Decodes a checkpoint read from `path`.
    pub fn decode(bytes: &[u8], path: &Path) -> Result<Self, CheckpointError> {
        let bad = |what: &str| CheckpointError::Corrupt { path: path.into(), what: what.to_string() };
        if bytes.len() < MAGIC.len() + 8 + 32 || &bytes[..8] != MAGIC {
            return Err(bad("wrong magic bytes (expected a DMCKPT01 file)"));
        }
        let (body, digest) = bytes.split_at(bytes.len() - 32);
        if Sha256::digest(body).as_slice() != digest {
            return Err(bad("checksum mismatch (file truncated or damaged)"));
        }
        let mut at = 8usize;
        let u64_at = |at: &mut usize| -> Result<u64, CheckpointError> {
            let b = body.get(*at..*at + 8).ok_or_else(|| bad("unexpected end of file"))?;
            *at += 8;
            Ok(u64::from_le_bytes(b.try_into().expect("8 bytes")))
        };
        let h = u64_at(&mut at)? as usize;
        let hb = body.get(at..at.saturating_add(h)).ok_or_else(|| bad("header runs past the end"))?;
        let header: Header = serde_json::from_slice(hb).map_err(|e| bad(&format!("header: {e}")))?;
        if header.format != 1 {
            return Err(bad(&format!("format version {} (this program reads 1)", header.format)));
        }
        at += h;
        let t = u64_at(&mut at)? as usize;
        let mut tallies = Vec::new();
        for _ in 0..t {
            let b = u64_at(&mut at)? as usize;
            let need = b.checked_mul(32).ok_or_else(|| bad("bin count overflows"))?;
            let raw = body.get(at..at.saturating_add(need)).ok_or_else(|| bad("tally runs past the end"))?;
            let vals: Vec<u128> = raw.chunks_exact(16).map(|c| u128::from_le_bytes(c.try_into().expect("16 bytes"))).collect();
            at += need;
            tallies.push((vals[..b].to_vec(), vals[b..].to_vec()));
        }
        let c = u64_at(&mut at)? as usize;
        let need = c.checked_mul(8).ok_or_else(|| bad("chunk count overflows"))?;
        let raw = body.get(at..at.saturating_add(need)).ok_or_else(|| bad("chunk list runs past the end"))?;
        let chunks = raw.chunks_exact(8).map(|c| u64::from_le_bytes(c.try_into().expect("8 bytes"))).collect();
        at += need;
        if at != body.len() {
            return Err(bad("trailing bytes after the chunk list"));
        }
        Ok(Checkpoint { header, tallies, chunks })
    }

    /// Writes the checkpoint atomically to `path`, replacing the previous one.
    pub fn write(&self, path: &Path) -> Result<(), CheckpointError> {
        crate::output::write_bytes_atomic(path, &self.encode(), true)?;
        Ok(())
    }

    /// Reads a checkpoint.
    pub fn read(path: &Path) -> Result<Self, CheckpointError> {
        let bytes = std::fs::read(path).map_err(|source| CheckpointError::Io { path: path.into(), source })?;
        Self::decode(&bytes, path)
    }

    /// Refuses the checkpoint unless it belongs to the run `current`.
    pub fn check_identity(&self, current: &Identity, path: &Path) -> Result<(), CheckpointError> {
        let differences = self.header.identity.differences(current);
        if differences.is_empty() {
            Ok(())
        } else {
            Err(CheckpointError::Mismatch { path: path.into(), differences })
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Checkpoint {
        Checkpoint {
            header: Header {
                format: 1,
                identity: Identity { deck_sha256: "ab".repeat(32), seed: 7, histories: 1000, chunk_histories: 100, data_tables_sha256: "cd".repeat(32), dosemill_version: "0.1.0".into() },
                job: Job { deck_path: "/x/d.toml".into(), sweep: vec![("source.kvp".into(), "80".into())], output: "/x/d.h5".into(), seed_override: None, threads: Some(2), shard: None },
                start_time: "2026-01-01T00:00:00Z".into(),
                histories_done: 300,
                wall_time_s: 1.5,
            },
            tallies: vec![(vec![1, u128::MAX, 3], vec![4, 5, 1 << 100]), (vec![], vec![])],
            chunks: vec![0, 1, 5],
        }
    }

    #[test]
    fn encode_decode_round_trip_is_exact() {
        let c = sample();
        let back = Checkpoint::decode(&c.encode(), Path::new("t.ckpt")).unwrap();
        assert_eq!(back, c);
    }

    #[test]
    fn every_truncation_and_bit_flip_is_detected() {
        let bytes = sample().encode();
        for n in 0..bytes.len() {
            assert!(Checkpoint::decode(&bytes[..n], Path::new("t")).is_err(), "truncated at {n}");
        }
        for i in (0..bytes.len()).step_by(7) {
            let mut b = bytes.clone();
            b[i] ^= 0x10;
            assert!(Checkpoint::decode(&b, Path::new("t")).is_err(), "flip at {i}");
        }
    }

    #[test]
    fn identity_mismatch_names_each_difference() {
        let c = sample();
        let mut other = c.header.identity.clone();
        other.seed = 8;
        other.dosemill_version = "0.2.0".into();
        let e = c.check_identity(&other, Path::new("t.ckpt")).unwrap_err().to_string();
        assert!(e.contains("seed (7 here, 8 now)"), "{e}");
        assert!(e.contains("dosemill version (0.1.0 here, 0.2.0 now)"), "{e}");
        assert!(!e.contains("deck ("), "{e}");
    }
}

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
use std::io::{Read, Write};
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

/// Raw sums of one tally for the encoder: its bin count and bin `i`'s (sum, sum of squares).
type RawBins<'a> = (usize, &'a dyn Fn(usize) -> (u128, u128));

/// A writer that hashes what passes through it.
struct Hashing<W> {
    inner: W,
    hash: Sha256,
}

impl<W: Write> Write for Hashing<W> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let n = self.inner.write(buf)?;
        self.hash.update(&buf[..n]);
        Ok(n)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// Streams the encoding (format above) of `header`, the tallies and `chunks` into `w`.
fn encode_into(w: &mut dyn Write, header: &Header, tallies: &[RawBins<'_>], chunks: &[u64]) -> std::io::Result<()> {
    let json = serde_json::to_vec(header).expect("header serialises");
    let mut h = Hashing { inner: w, hash: Sha256::new() };
    h.write_all(MAGIC)?;
    h.write_all(&(json.len() as u64).to_le_bytes())?;
    h.write_all(&json)?;
    h.write_all(&(tallies.len() as u64).to_le_bytes())?;
    for (bins, raw) in tallies {
        h.write_all(&(*bins as u64).to_le_bytes())?;
        for i in 0..*bins {
            h.write_all(&raw(i).0.to_le_bytes())?;
        }
        for i in 0..*bins {
            h.write_all(&raw(i).1.to_le_bytes())?;
        }
    }
    h.write_all(&(chunks.len() as u64).to_le_bytes())?;
    for c in chunks {
        h.write_all(&c.to_le_bytes())?;
    }
    let digest = h.hash.finalize();
    h.inner.write_all(&digest)
}

/// Writes the encoding atomically to `path`, replacing the previous checkpoint.
fn write_encoded(path: &Path, header: &Header, tallies: &[RawBins<'_>], chunks: &[u64]) -> Result<(), CheckpointError> {
    crate::output::write_stream_atomic(path, true, |w| encode_into(w, header, tallies, chunks))?;
    Ok(())
}

/// A reader that hashes what it hands out and reports a short file as corruption.
struct Reading<'p, R> {
    inner: R,
    hash: Sha256,
    path: &'p Path,
}

impl<R: Read> Reading<'_, R> {
    fn bad(&self, what: &str) -> CheckpointError {
        CheckpointError::Corrupt { path: self.path.into(), what: what.to_string() }
    }
    fn exact(&mut self, buf: &mut [u8], what: &str) -> Result<(), CheckpointError> {
        match self.inner.read_exact(buf) {
            Ok(()) => {
                self.hash.update(&*buf);
                Ok(())
            }
            Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => Err(self.bad(what)),
            Err(source) => Err(CheckpointError::Io { path: self.path.into(), source }),
        }
    }
    fn u64(&mut self) -> Result<u64, CheckpointError> {
        let mut b = [0u8; 8];
        self.exact(&mut b, "unexpected end of file")?;
        Ok(u64::from_le_bytes(b))
    }
}

/// What the decoder does with the saved sums: told each tally's bin count, then handed the
/// sums (`squares` false) and the squares (true) block by block.
trait SumsSink {
    fn tally(&mut self, index: usize, bins: usize) -> Result<(), String>;
    fn values(&mut self, index: usize, squares: bool, start: usize, values: &[u128]);
}

/// Streams a checkpoint from `r` (format above) into `sink`; returns the header and the
/// completed chunks. The checksum is verified at the end: a caller must discard what the sink
/// received if this fails.
fn decode_from(r: impl Read, path: &Path, sink: &mut dyn SumsSink) -> Result<(Header, Vec<u64>), CheckpointError> {
    let mut rd = Reading { inner: r, hash: Sha256::new(), path };
    let mut magic = [0u8; 8];
    rd.exact(&mut magic, "wrong magic bytes (expected a DMCKPT01 file)")?;
    if &magic != MAGIC {
        return Err(rd.bad("wrong magic bytes (expected a DMCKPT01 file)"));
    }
    let h = rd.u64()?;
    let mut hb = Vec::new();
    (&mut rd.inner).take(h).read_to_end(&mut hb).map_err(|source| CheckpointError::Io { path: path.into(), source })?;
    if hb.len() as u64 != h {
        return Err(rd.bad("header runs past the end"));
    }
    rd.hash.update(&hb);
    let header: Header = serde_json::from_slice(&hb).map_err(|e| rd.bad(&format!("header: {e}")))?;
    if header.format != 1 {
        return Err(rd.bad(&format!("format version {} (this program reads 1)", header.format)));
    }
    let t = rd.u64()?;
    const BLOCK: usize = 1 << 14;
    let mut bytes = vec![0u8; 16 * BLOCK];
    let mut vals = vec![0u128; BLOCK];
    for index in 0..t as usize {
        let b = usize::try_from(rd.u64()?).map_err(|_| rd.bad("bin count overflows"))?;
        sink.tally(index, b).map_err(|what| rd.bad(&what))?;
        for squares in [false, true] {
            let mut start = 0;
            while start < b {
                let k = BLOCK.min(b - start);
                rd.exact(&mut bytes[..16 * k], "tally runs past the end")?;
                for (v, c) in vals.iter_mut().zip(bytes[..16 * k].chunks_exact(16)) {
                    *v = u128::from_le_bytes(c.try_into().expect("16 bytes"));
                }
                sink.values(index, squares, start, &vals[..k]);
                start += k;
            }
        }
    }
    let c = rd.u64()?;
    let mut chunks = Vec::new();
    for _ in 0..c {
        chunks.push(rd.u64()?);
    }
    let expected = std::mem::take(&mut rd.hash).finalize();
    let mut digest = [0u8; 32];
    match rd.inner.read_exact(&mut digest) {
        Ok(()) => {}
        Err(e) if e.kind() == std::io::ErrorKind::UnexpectedEof => return Err(rd.bad("checksum mismatch (file truncated or damaged)")),
        Err(source) => return Err(CheckpointError::Io { path: path.into(), source }),
    }
    if digest != expected.as_slice() {
        return Err(rd.bad("checksum mismatch (file truncated or damaged)"));
    }
    let mut extra = [0u8; 1];
    match rd.inner.read(&mut extra) {
        Ok(0) => {}
        Ok(_) => return Err(rd.bad("trailing bytes after the checksum")),
        Err(source) => return Err(CheckpointError::Io { path: path.into(), source }),
    }
    Ok((header, chunks))
}

/// Collects the sums into vectors.
#[derive(Default)]
struct Collect(Vec<(Vec<u128>, Vec<u128>)>);

impl SumsSink for Collect {
    fn tally(&mut self, _: usize, _: usize) -> Result<(), String> {
        self.0.push((Vec::new(), Vec::new()));
        Ok(())
    }
    fn values(&mut self, index: usize, squares: bool, _: usize, values: &[u128]) {
        let t = &mut self.0[index];
        if squares { &mut t.1 } else { &mut t.0 }.extend_from_slice(values);
    }
}

/// Discards the sums (reading the header, chunk list and checksum only).
struct Discard;

impl SumsSink for Discard {
    fn tally(&mut self, _: usize, _: usize) -> Result<(), String> {
        Ok(())
    }
    fn values(&mut self, _: usize, _: bool, _: usize, _: &[u128]) {}
}

/// Loads the sums straight into a run result's tallies, a block at a time.
struct IntoResult<'a> {
    result: &'a mut RunResult,
    squares_pending: Vec<u128>,
    tallies_seen: usize,
}

impl SumsSink for IntoResult<'_> {
    fn tally(&mut self, index: usize, bins: usize) -> Result<(), String> {
        let scorers = self.result.scorers.len();
        let s = self.result.scorers.get_mut(index).ok_or_else(|| format!("more tallies saved than the deck's {scorers} scores"))?;
        if s.tally().len() != bins {
            return Err(format!("score {index}: {bins} bins saved, the deck gives {}", s.tally().len()));
        }
        let z = s.tally().zeroed_like();
        *s.tally_mut() = z;
        self.tallies_seen += 1;
        Ok(())
    }
    fn values(&mut self, index: usize, squares: bool, start: usize, values: &[u128]) {
        // Sums and squares arrive in separate passes; pair each block of squares with zero sums
        // (adding is exact, so the order of the two passes does not matter).
        self.squares_pending.clear();
        self.squares_pending.resize(values.len(), 0);
        let t = self.result.scorers[index].tally_mut();
        if squares {
            t.add_raw_at(start, &self.squares_pending, values);
        } else {
            t.add_raw_at(start, values, &self.squares_pending);
        }
    }
}

impl Checkpoint {
    /// Writes the checkpoint of `result` for `header` atomically to `path`, streaming the sums
    /// straight from the tallies (no copy of a large voxel grid is made).
    pub fn write_result(header: &Header, result: &RunResult, path: &Path) -> Result<(), CheckpointError> {
        let raws: Vec<Box<dyn Fn(usize) -> (u128, u128) + '_>> =
            result.scorers.iter().map(|s| Box::new(move |i| s.tally().raw_bin(i)) as Box<dyn Fn(usize) -> (u128, u128)>).collect();
        let tallies: Vec<RawBins<'_>> = result.scorers.iter().zip(&raws).map(|(s, f)| (s.tally().len(), &**f)).collect();
        write_encoded(path, header, &tallies, &result.chunks)
    }

    /// Reads the checkpoint at `path` straight into a run result of `problem` (a block of sums
    /// at a time), with its header; fails if the tally shapes differ or the file is damaged.
    pub fn load_result(problem: &Problem, path: &Path) -> Result<(Header, RunResult), CheckpointError> {
        let f = std::fs::File::open(path).map_err(|source| CheckpointError::Io { path: path.into(), source })?;
        let mut r = RunResult::empty(problem);
        let mut sink = IntoResult { result: &mut r, squares_pending: Vec::new(), tallies_seen: 0 };
        let (header, chunks) = decode_from(std::io::BufReader::with_capacity(1 << 20, f), path, &mut sink)?;
        let seen = sink.tallies_seen;
        if seen != r.scorers.len() {
            return Err(CheckpointError::Corrupt { path: path.into(), what: format!("{seen} tallies saved, the deck has {} scores", r.scorers.len()) });
        }
        r.histories = header.histories_done;
        r.chunks = chunks;
        r.wall_time_s = header.wall_time_s;
        Ok((header, r))
    }

    /// `f` applied to the saved tallies as the encoder reads them.
    fn with_raw_bins<T>(&self, f: impl FnOnce(&[RawBins<'_>]) -> T) -> T {
        let raws: Vec<Box<dyn Fn(usize) -> (u128, u128) + '_>> =
            self.tallies.iter().map(|(a, b)| Box::new(move |i: usize| (a[i], b[i])) as Box<dyn Fn(usize) -> (u128, u128)>).collect();
        let tallies: Vec<RawBins<'_>> = self.tallies.iter().zip(&raws).map(|(t, r)| (t.0.len(), &**r)).collect();
        f(&tallies)
    }

    /// Encodes the checkpoint (format above).
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        self.with_raw_bins(|t| encode_into(&mut out, &self.header, t, &self.chunks)).expect("writing to memory");
        out
    }

    /// Decodes a checkpoint read from `path`.
    pub fn decode(bytes: &[u8], path: &Path) -> Result<Self, CheckpointError> {
        let mut sink = Collect::default();
        let (header, chunks) = decode_from(bytes, path, &mut sink)?;
        Ok(Checkpoint { header, tallies: sink.0, chunks })
    }

    /// Writes the checkpoint atomically to `path`, replacing the previous one.
    pub fn write(&self, path: &Path) -> Result<(), CheckpointError> {
        self.with_raw_bins(|t| write_encoded(path, &self.header, t, &self.chunks))
    }

    /// Reads a checkpoint, sums included (see [`Checkpoint::read_header`] for a large one).
    pub fn read(path: &Path) -> Result<Self, CheckpointError> {
        let f = std::fs::File::open(path).map_err(|source| CheckpointError::Io { path: path.into(), source })?;
        let mut sink = Collect::default();
        let (header, chunks) = decode_from(std::io::BufReader::new(f), path, &mut sink)?;
        Ok(Checkpoint { header, tallies: sink.0, chunks })
    }

    /// Reads and verifies a whole checkpoint but keeps only its header and chunk list (the
    /// returned checkpoint has no tallies): constant memory whatever the size of the sums.
    pub fn read_header(path: &Path) -> Result<Self, CheckpointError> {
        let f = std::fs::File::open(path).map_err(|source| CheckpointError::Io { path: path.into(), source })?;
        let (header, chunks) = decode_from(std::io::BufReader::new(f), path, &mut Discard)?;
        Ok(Checkpoint { header, tallies: Vec::new(), chunks })
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

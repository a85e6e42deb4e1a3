//! Memory and disk estimates made before a run starts, so an impossible request is refused
//! with a message instead of running the machine out of memory hours later.
//!
//! The estimate counts what grows with the deck: every dense tally bin costs [`BYTES_PER_BIN`]
//! bytes in each worker's copy, in the merged copy and in the copy being checkpointed
//! (`threads + 2` copies); a voxel dose bin is a shared tally bin ([`SHARED_BYTES_PER_BIN`] once,
//! whatever the thread count; its result file and checkpoint are streamed from the tally and
//! need no copy of it); a voxel geometry costs [`BYTES_PER_GEOMETRY_VOXEL`] per voxel once;
//! plus a fixed [`BASE_BYTES`] for the interaction tables and the program. On disk the result
//! file holds five f64 per voxel dose bin (dose, energy, each with σ, and mass) and the
//! checkpoint 32 bytes per bin.

use crate::deck::{Geometry, ResolvedDeck, ScoreKind, VoxelContent};

/// Bytes per tally bin per copy: two u128 sums (32 B, [`crate::score::tally::DENSE_BYTES_PER_BIN`])
/// and 16 B for the raw copies made when a checkpoint or shard of dense tallies is written.
pub const BYTES_PER_BIN: u64 = 48;
pub use crate::score::tally::SHARED_BYTES_PER_BIN;
/// Bytes per voxel of a voxel geometry (material index, density, lookup caches).
pub const BYTES_PER_GEOMETRY_VOXEL: u64 = 18;
/// Fixed part: tables, program, buffers.
pub const BASE_BYTES: u64 = 64 << 20;
/// Environment variable overriding the memory limit (bytes), for machines where the job's
/// memory allowance is smaller than what the system reports free (e.g. a batch slot).
pub const MEMORY_LIMIT_ENV: &str = "DOSEMILL_MEMORY_LIMIT_BYTES";

/// What a run of a deck would need.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Estimate {
    /// Tally bins over all scores.
    pub bins: u64,
    /// Voxels of the geometry.
    pub geometry_voxels: u64,
    /// Peak memory (bytes).
    pub memory_bytes: u64,
    /// Result file plus checkpoint (bytes).
    pub disk_bytes: u64,
}

/// The run would not fit.
#[derive(Debug, thiserror::Error)]
pub enum LimitError {
    /// Not enough memory.
    #[error("the run needs an estimated {} of memory ({bins} tally bins: dense ones × {BYTES_PER_BIN} B × {copies} copies for {threads} threads, voxel dose ones × {SHARED_BYTES_PER_BIN} B; {voxels} geometry voxels × {BYTES_PER_GEOMETRY_VOXEL} B, plus {} fixed) but the limit is {} ({source_of_limit}); use fewer or coarser bins, fewer threads (--threads), or set {MEMORY_LIMIT_ENV} if more memory is really available", human(*.needed), human(BASE_BYTES), human(*.limit))]
    Memory {
        /// Estimated need (bytes).
        needed: u64,
        /// Limit (bytes).
        limit: u64,
        /// Where the limit comes from.
        source_of_limit: String,
        /// Tally bins.
        bins: u64,
        /// Copies of the tallies.
        copies: u64,
        /// Threads.
        threads: usize,
        /// Geometry voxels.
        voxels: u64,
    },
    /// Not enough free disk space.
    #[error("the result and checkpoint need an estimated {} on disk but only {} is free in {folder}; free space or write elsewhere (--out)", human(*.needed), human(*.free))]
    Disk {
        /// Estimated need (bytes).
        needed: u64,
        /// Free bytes.
        free: u64,
        /// The output folder.
        folder: String,
    },
}

/// Bytes as text (`1.5 GB`).
pub fn human(b: u64) -> String {
    let units = ["B", "kB", "MB", "GB", "TB", "PB", "EB"];
    let mut v = b as f64;
    let mut u = 0;
    while v >= 1000.0 && u + 1 < units.len() {
        v /= 1000.0;
        u += 1;
    }
    if u == 0 { format!("{b} B") } else { format!("{v:.1} {}", units[u]) }
}

fn bins_of(kind: &ScoreKind, geometry_voxels: u64, layers: u64) -> u64 {
    let count = |lo: f64, hi: f64, w: f64| -> u64 {
        let n = ((hi - lo) / w).round();
        if n.is_finite() && n >= 1.0 { n.min(u64::MAX as f64) as u64 } else { 1 }
    };
    match kind {
        ScoreKind::LayerEnergy => layers + 1,
        ScoreKind::DepthDose { z_min_cm, z_max_cm, bin_width_cm } => count(*z_min_cm, *z_max_cm, *bin_width_cm),
        ScoreKind::Escape => 4,
        ScoreKind::InteractionCounts => 16,
        ScoreKind::TransmittedSpectrum { energy_min_kev, energy_max_kev, bin_width_kev } => 4u64.saturating_mul(count(*energy_min_kev, *energy_max_kev, *bin_width_kev)),
        ScoreKind::AirKerma { .. } => 6,
        ScoreKind::VoxelDose { grid, .. } => grid.as_ref().map(|g| g.voxels.iter().fold(1u64, |a, &b| a.saturating_mul(b))).unwrap_or(geometry_voxels),
        // Primary and scatter signal per pixel.
        ScoreKind::Detector(d) => 2u64.saturating_mul(d.pixels[0].saturating_mul(d.pixels[1])),
    }
}

/// Extra disk bytes per bin of a shard file: the raw 128-bit sums as four u64 words (written
/// block by block from the tally, so they take no extra memory).
pub const SHARD_DISK_BYTES_PER_BIN: u64 = 32;

/// The estimate for `deck` run on `threads` threads.
pub fn estimate(deck: &ResolvedDeck, threads: usize) -> Estimate {
    estimate_with(deck, threads, false)
}

/// [`estimate`] for a run that is (`sharded`) or is not one shard of a split run.
pub fn estimate_with(deck: &ResolvedDeck, threads: usize, sharded: bool) -> Estimate {
    let (voxels, layers) = match &deck.geometry {
        Geometry::Slabs(s) => (0, s.layers.len() as u64),
        Geometry::Voxels(v) => match &v.content {
            VoxelContent::Raw { grid, .. } | VoxelContent::Phantom { grid, .. } => (grid.voxels.iter().fold(1u64, |a, &b| a.saturating_mul(b)), 0),
            VoxelContent::Hdf5 { path } => (std::fs::metadata(path).map(|m| m.len()).unwrap_or(0), 0),
        },
    };
    let bins = deck.scores.iter().fold(0u64, |a, s| a.saturating_add(bins_of(&s.kind, voxels, layers)));
    let shared = deck.scores.iter().filter(|s| matches!(s.kind, ScoreKind::VoxelDose { .. })).fold(0u64, |a, s| a.saturating_add(bins_of(&s.kind, voxels, layers)));
    let dense = bins - shared;
    let copies = threads as u64 + 2;
    let memory_bytes = BASE_BYTES
        .saturating_add(dense.saturating_mul(BYTES_PER_BIN).saturating_mul(copies))
        .saturating_add(shared.saturating_mul(SHARED_BYTES_PER_BIN))
        .saturating_add(voxels.saturating_mul(BYTES_PER_GEOMETRY_VOXEL));
    // Result: value and σ per dense bin, five f64 per voxel dose bin; checkpoint: 32 B per bin;
    // a shard file also its raw words.
    let disk_bytes = dense
        .saturating_mul(16 + 32)
        .saturating_add(shared.saturating_mul(40 + 32))
        .saturating_add(if sharded { bins.saturating_mul(SHARD_DISK_BYTES_PER_BIN) } else { 0 })
        .saturating_add(1 << 20);
    Estimate { bins, geometry_voxels: voxels, memory_bytes, disk_bytes }
}

/// The memory a run may use: [`MEMORY_LIMIT_ENV`] if set, else the system's available memory
/// (`MemAvailable` in /proc/meminfo), else no limit.
pub fn memory_limit() -> Option<(u64, String)> {
    if let Some(v) = std::env::var(MEMORY_LIMIT_ENV).ok().and_then(|v| v.trim().parse::<u64>().ok()) {
        return Some((v, format!("set by {MEMORY_LIMIT_ENV}")));
    }
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemAvailable:"))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some((kb * 1024, "memory available on this machine".to_string()))
}

/// Free bytes in the file system holding `folder`.
pub fn free_disk_bytes(folder: &std::path::Path) -> Option<u64> {
    let probe = if folder.as_os_str().is_empty() { std::path::Path::new(".") } else { folder };
    let s = rustix::fs::statvfs(probe).ok()?;
    Some(s.f_bavail.saturating_mul(s.f_frsize))
}

/// Refuses `deck` on `threads` threads when the estimate exceeds the memory limit or the free
/// space in `out_folder`.
pub fn check(deck: &ResolvedDeck, threads: usize, out_folder: &std::path::Path) -> Result<Estimate, LimitError> {
    check_with(deck, threads, out_folder, false)
}

/// [`check`] for a run that is (`sharded`) or is not one shard of a split run.
pub fn check_with(deck: &ResolvedDeck, threads: usize, out_folder: &std::path::Path, sharded: bool) -> Result<Estimate, LimitError> {
    let e = estimate_with(deck, threads, sharded);
    if let Some((limit, source_of_limit)) = memory_limit() {
        if e.memory_bytes > limit {
            return Err(LimitError::Memory { needed: e.memory_bytes, limit, source_of_limit, bins: e.bins, copies: threads as u64 + 2, threads, voxels: e.geometry_voxels });
        }
    }
    let mut folder = out_folder.to_path_buf();
    while !folder.as_os_str().is_empty() && !folder.exists() {
        folder = folder.parent().map(|p| p.to_path_buf()).unwrap_or_default();
    }
    if let Some(free) = free_disk_bytes(&folder) {
        if e.disk_bytes > free {
            return Err(LimitError::Disk { needed: e.disk_bytes, free, folder: folder.display().to_string() });
        }
    }
    Ok(e)
}

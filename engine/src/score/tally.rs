//! History-by-history accumulation of a score with its uncertainty.
//!
//! Each bin keeps the running sum of its per-history totals and the sum of their squares, so the
//! estimate of the mean per history and of its standard error follow exactly (Sempau et al.,
//! "Experimental benchmarks of the Monte Carlo code…", 2001, describe this bookkeeping): a bin
//! remembers the last history that touched it and folds the previous history's total into the
//! sums when a new history arrives; `flush` folds the last one.
//!
//! Sums are kept in 128-bit fixed point (`FRACTION_BITS` fractional bits). Integer addition is
//! associative, so partial tallies from any number of workers, checkpoints or shards merge to the
//! same bits in any order: a run's result is bitwise independent of the thread count and of how
//! it was split. Per-history values are rounded to 2⁻⁵⁰ ≈ 8.9e-16 of the score's unit; sums hold
//! up to 2⁷⁸ ≈ 3e23 units. Scorers therefore tally in units where a history's value is not tiny
//! (keV, keV/g, photons, 1/cm²; not Gy) so that the squares are resolved, and convert units when
//! results are written.
//!
//! Two stores hold the sums:
//!
//! - **Dense** (the default): each worker owns a full copy of the sums (32 bytes per bin: two
//!   128-bit sums) and gathers the current history's totals in a small hash table of the bins
//!   it touched, folded into the sums when the next history starts (the same per-history totals,
//!   in the same order, as a per-bin running total); copies are added at the end of a run.
//! - **Shared** (voxel dose grids): one copy of the sums for the whole run, two 64-bit atomic
//!   fixed-point words per bin (16 bytes), whatever the number of workers. Each worker gathers
//!   the current history's totals in a small hash table of the bins it touched and, when the
//!   history ends, adds each total and its square to the shared words with an atomic integer
//!   add. Integer addition commutes, so the sums are the same bits in any order and on any
//!   number of threads. Sums have 2⁻²⁴ (values) and 2⁻¹⁶ (squares) resolution; each
//!   per-history value is rounded with a dither drawn from a hash of (history, bin), so the
//!   rounding is unbiased even for values far below the resolution and still reproducible
//!   (it depends on nothing but the history and the bin). A word that would exceed 2⁶⁴ units
//!   (about 1.1·10¹² keV per bin, or 2.8·10¹⁴ keV² of squares) saturates, and the bin then
//!   reads as NaN rather than as a wrong number.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;

/// Fractional bits of the fixed-point sums.
pub const FRACTION_BITS: i32 = 50;
const SCALE: f64 = (1u64 << FRACTION_BITS) as f64;
/// Fractional bits of a shared store's sums of values.
pub const SHARED_SUM_BITS: i32 = 24;
/// Fractional bits of a shared store's sums of squares.
pub const SHARED_SUM2_BITS: i32 = 16;
const SHARED_SUM_SCALE: f64 = (1u64 << SHARED_SUM_BITS) as f64;
const SHARED_SUM2_SCALE: f64 = (1u64 << SHARED_SUM2_BITS) as f64;
/// Bytes per bin of a shared store.
pub const SHARED_BYTES_PER_BIN: u64 = 16;
/// Bytes per bin of a dense store, per copy.
pub const DENSE_BYTES_PER_BIN: u64 = 32;

#[inline(always)]
fn to_fixed(v: f64) -> u128 {
    // Scores are non-negative; a negative value would be a bug upstream.
    debug_assert!(v >= 0.0, "negative score contribution {v}");
    let x = v * SCALE + 0.5;
    // Below 2⁶⁴ the conversion through u64 truncates exactly as the direct one (which is a
    // library call on x86-64); larger values take the direct conversion.
    if x < 18_446_744_073_709_551_616.0 { x as u64 as u128 } else { x as u128 }
}

#[inline(always)]
fn from_fixed(v: u128) -> f64 {
    v as f64 / SCALE
}

/// `v · scale` rounded down after adding the dither `u` ∈ [0, 1): unbiased rounding. Values
/// beyond the word saturate.
#[inline(always)]
fn to_word(v: f64, scale: f64, u: f64) -> u64 {
    debug_assert!(v >= 0.0, "negative score contribution {v}");
    let x = v * scale + u;
    if x >= 18_446_744_073_709_551_615.0 { u64::MAX } else { x as u64 }
}

/// SplitMix64 finaliser (Steele, Lea & Flood 2014): a well-mixed 64-bit hash.
#[inline(always)]
fn mix64(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

/// Two dithers in [0, 1) for (history, bin).
#[inline(always)]
fn dithers(history: u64, bin: u32) -> (f64, f64) {
    let h = mix64(history.wrapping_mul(0x9e37_79b9_7f4a_7c15) ^ (bin as u64).wrapping_mul(0xd6e8_feb8_6659_fd93));
    let a = (h >> 40) as f64 * (1.0 / (1u64 << 24) as f64);
    let b = ((h >> 16) & 0xff_ffff) as f64 * (1.0 / (1u64 << 24) as f64);
    (a, b)
}

#[inline(always)]
fn add_saturating(word: &AtomicU64, v: u64) {
    if v == 0 {
        return;
    }
    // A compare-and-swap loop rather than fetch_add, so an overflow saturates instead of
    // wrapping; min(total, 2⁶⁴ − 1) is the same whatever the order of the adds.
    let mut cur = word.load(Ordering::Relaxed);
    loop {
        let next = cur.saturating_add(v);
        match word.compare_exchange_weak(cur, next, Ordering::Relaxed, Ordering::Relaxed) {
            Ok(_) => return,
            Err(now) => cur = now,
        }
    }
}

const NO_HISTORY: u64 = u64::MAX;
const EMPTY_KEY: u32 = u32::MAX;
/// Initial slots of a worker's per-history table (grows by doubling when half full).
const PENDING_SLOTS: usize = 1024;

/// The sums of a shared store (one per run, shared by every worker).
#[derive(Debug)]
pub struct SharedSums {
    bins: usize,
    /// Per bin, the sum of values and the sum of squares side by side (one cache line holds
    /// both, so a history's fold touches one line per bin). Empty in a template (see
    /// [`Tally::shared_template`]).
    words: Vec<[AtomicU64; 2]>,
}

impl SharedSums {
    fn zeroed(bins: usize) -> Self {
        assert!(bins < EMPTY_KEY as usize, "a shared tally holds fewer than 2^32 - 1 bins");
        SharedSums { bins, words: (0..bins).map(|_| [AtomicU64::new(0), AtomicU64::new(0)]).collect() }
    }

    fn template(bins: usize) -> Self {
        assert!(bins < EMPTY_KEY as usize, "a shared tally holds fewer than 2^32 - 1 bins");
        SharedSums { bins, words: Vec::new() }
    }

    /// Word `i` of the sums and of the squares (0 in a template).
    #[inline]
    fn words(&self, i: usize) -> (u64, u64) {
        match self.words.get(i) {
            Some([a, b]) => (a.load(Ordering::Relaxed), b.load(Ordering::Relaxed)),
            None => (0, 0),
        }
    }
}

/// The totals of the open history in the bins it touched: open addressing, linear probing.
#[derive(Debug, Clone)]
struct Pending {
    history: u64,
    keys: Vec<u32>,
    vals: Vec<f64>,
    used: Vec<u32>,
}

impl Pending {
    fn new() -> Self {
        Pending { history: NO_HISTORY, keys: vec![EMPTY_KEY; PENDING_SLOTS], vals: vec![0.0; PENDING_SLOTS], used: Vec::with_capacity(PENDING_SLOTS / 2) }
    }

    #[inline(always)]
    fn slot_of(key: u32, mask: usize) -> usize {
        ((key as u64).wrapping_mul(0x9e37_79b9_7f4a_7c15) >> 32) as usize & mask
    }

    /// Adds `v` to bin `key`; true when the bin is new in this history.
    #[inline(always)]
    fn add(&mut self, key: u32, v: f64) -> bool {
        let mask = self.keys.len() - 1;
        let mut i = Self::slot_of(key, mask);
        loop {
            let k = self.keys[i];
            if k == key {
                self.vals[i] += v;
                return false;
            }
            if k == EMPTY_KEY {
                self.keys[i] = key;
                self.vals[i] = v;
                self.used.push(i as u32);
                if 2 * self.used.len() > self.keys.len() {
                    self.grow();
                }
                return true;
            }
            i = (i + 1) & mask;
        }
    }

    /// Doubles the table (rare: only while the largest history seen so far grows).
    #[cold]
    fn grow(&mut self) {
        let entries: Vec<(u32, f64)> = self.used.iter().map(|&i| (self.keys[i as usize], self.vals[i as usize])).collect();
        let n = self.keys.len() * 2;
        self.keys = vec![EMPTY_KEY; n];
        self.vals = vec![0.0; n];
        self.used.clear();
        self.used.reserve(n / 2);
        for (k, v) in entries {
            let _ = self.add(k, v);
        }
    }

    /// Adds the open history's totals and their squares to dense 2⁻⁵⁰ fixed-point `sums` and
    /// empties the table (a bin whose total is zero adds nothing).
    fn fold_into_dense(&mut self, sums: &mut [[u128; 2]]) {
        for &i in &self.used {
            let i = i as usize;
            let (key, c) = (self.keys[i], self.vals[i]);
            if c != 0.0 {
                let s = &mut sums[key as usize];
                s[0] += to_fixed(c);
                s[1] += to_fixed(c * c);
            }
            self.keys[i] = EMPTY_KEY;
        }
        self.used.clear();
    }

    /// Adds the open history's totals and their squares to `sums` and empties the table.
    fn fold_into(&mut self, sums: &SharedSums) {
        let h = self.history;
        assert!(self.used.is_empty() || !sums.words.is_empty(), "scoring into a shared-tally template: score into Tally::zeroed_like() or worker_view()");
        for &i in &self.used {
            let i = i as usize;
            let (key, c) = (self.keys[i], self.vals[i]);
            if c != 0.0 {
                let (u1, u2) = dithers(h, key);
                let [w, w2] = &sums.words[key as usize];
                add_saturating(w, to_word(c, SHARED_SUM_SCALE, u1));
                add_saturating(w2, to_word(c * c, SHARED_SUM2_SCALE, u2));
            }
            self.keys[i] = EMPTY_KEY;
        }
        self.used.clear();
    }
}

#[derive(Debug, Clone)]
enum Store {
    /// Per bin the sums [Σx, Σx²] (2⁻⁵⁰ fixed point); the open history's totals in a small hash
    /// table of the bins it touched (folded into the sums when the next history starts).
    Dense { sums: Vec<[u128; 2]>, pending: Pending },
    Shared { sums: Arc<SharedSums>, pending: Pending },
}

/// A set of bins scored history by history.
#[derive(Debug, Clone)]
pub struct Tally {
    store: Store,
}

impl PartialEq for Tally {
    fn eq(&self, other: &Self) -> bool {
        self.len() == other.len() && self.raw() == other.raw()
    }
}

impl Tally {
    /// A zeroed dense tally of `bins` bins.
    pub fn new(bins: usize) -> Self {
        assert!(bins < EMPTY_KEY as usize, "a dense tally holds fewer than 2³² − 1 bins");
        Self { store: Store::Dense { sums: vec![[0; 2]; bins], pending: Pending::new() } }
    }

    /// A zeroed shared tally of `bins` bins (one copy of the sums for all workers).
    pub fn shared(bins: usize) -> Self {
        Self { store: Store::Shared { sums: Arc::new(SharedSums::zeroed(bins)), pending: Pending::new() } }
    }

    /// A shared tally of `bins` bins that holds no sums yet: the configuration a problem keeps.
    /// [`Tally::zeroed_like`] gives the run's copy (allocated); scoring into the template itself
    /// is a bug and panics.
    pub fn shared_template(bins: usize) -> Self {
        Self { store: Store::Shared { sums: Arc::new(SharedSums::template(bins)), pending: Pending::new() } }
    }

    /// True for a shared store.
    pub fn is_shared(&self) -> bool {
        matches!(self.store, Store::Shared { .. })
    }

    /// A zeroed tally of the same shape and store kind (a shared store gets new sums).
    pub fn zeroed_like(&self) -> Tally {
        match &self.store {
            Store::Dense { sums, .. } => Tally::new(sums.len()),
            Store::Shared { sums, .. } => Tally::shared(sums.bins),
        }
    }

    /// The tally a worker scores into: a zeroed dense copy, or a view of the same shared sums
    /// with an empty history table. Merging the worker's tally back adds the dense copy;
    /// a view of the same sums is already in.
    pub fn worker_view(&self) -> Tally {
        match &self.store {
            Store::Dense { sums, .. } => Tally::new(sums.len()),
            Store::Shared { sums, .. } => Tally { store: Store::Shared { sums: Arc::clone(sums), pending: Pending::new() } },
        }
    }

    /// Number of bins.
    pub fn len(&self) -> usize {
        match &self.store {
            Store::Dense { sums, .. } => sums.len(),
            Store::Shared { sums, .. } => sums.bins,
        }
    }

    /// True for a tally without bins.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Asks for the cache line of bin `bin`'s sums, without waiting for it (a hint ahead of an
    /// [`Self::add`] there).
    #[inline(always)]
    pub fn prefetch(&self, bin: usize) {
        match &self.store {
            Store::Dense { sums, .. } => {
                if let Some(w) = sums.get(bin) {
                    dosemill_geometry::prefetch(w);
                }
            }
            Store::Shared { sums, .. } => {
                if let Some(w) = sums.words.get(bin) {
                    dosemill_geometry::prefetch(w);
                }
            }
        }
    }

    /// Adds `value` to bin `bin` for history `history`.
    #[inline(always)]
    pub fn add(&mut self, bin: usize, value: f64, history: u64) {
        match &mut self.store {
            Store::Dense { sums, pending } => {
                if pending.history != history {
                    pending.fold_into_dense(sums);
                    pending.history = history;
                }
                debug_assert!(bin < sums.len());
                if pending.add(bin as u32, value) {
                    // Ask for the bin's sums now, so their cache line is on its way before the fold.
                    // (Here in each arm, not through `Self::prefetch` after the match: that
                    // measured 3–4 % slower on P3.)
                    if let Some(w) = sums.get(bin) {
                        dosemill_geometry::prefetch(w);
                    }
                }
            }
            Store::Shared { sums, pending } => {
                if pending.history != history {
                    pending.fold_into(sums);
                    pending.history = history;
                }
                debug_assert!(bin < sums.bins);
                if pending.add(bin as u32, value) {
                    // Ask for the bin's words now, so their cache line is on its way long before
                    // the history ends and its totals are added there.
                    if let Some(w) = sums.words.get(bin) {
                        dosemill_geometry::prefetch(w);
                    }
                }
            }
        }
    }

    /// Folds every pending history total into the sums.
    pub fn flush(&mut self) {
        match &mut self.store {
            Store::Dense { sums, pending } => {
                pending.fold_into_dense(sums);
                pending.history = NO_HISTORY;
            }
            Store::Shared { sums, pending } => {
                pending.fold_into(sums);
                pending.history = NO_HISTORY;
            }
        }
    }

    /// Zeroes a flushed worker tally in place, for the next chunks after its sums were merged:
    /// a dense tally's sums are cleared (no new allocation); a shared view holds nothing of
    /// its own once flushed.
    pub fn clear_flushed(&mut self) {
        match &mut self.store {
            Store::Dense { sums, pending } => {
                debug_assert!(pending.used.is_empty(), "clearing an unflushed tally");
                sums.iter_mut().for_each(|s| *s = [0; 2]);
            }
            Store::Shared { pending, .. } => {
                debug_assert!(pending.used.is_empty(), "clearing an unflushed tally");
            }
        }
    }

    /// Adds another (flushed) tally of the same shape into this one. A view of this tally's
    /// own shared sums adds nothing (its histories are in already).
    pub fn merge(&mut self, other: &Tally) {
        assert_eq!(self.len(), other.len(), "merging tallies of different shapes");
        match (&mut self.store, &other.store) {
            (Store::Dense { sums, .. }, Store::Dense { sums: o, .. }) => {
                for (a, b) in sums.iter_mut().zip(o) {
                    a[0] += b[0];
                    a[1] += b[1];
                }
            }
            (Store::Shared { sums, .. }, Store::Shared { sums: o, .. }) => {
                if !Arc::ptr_eq(sums, o) && !o.words.is_empty() {
                    assert!(!sums.words.is_empty(), "merging into a shared-tally template");
                    for i in 0..sums.words.len() {
                        let (a, b) = o.words(i);
                        add_saturating(&sums.words[i][0], a);
                        add_saturating(&sums.words[i][1], b);
                    }
                }
            }
            _ => {
                let (a, b) = other.raw();
                self.add_raw(&a, &b);
            }
        }
    }

    /// Adds raw sums (in the 2⁻⁵⁰ format of [`Tally::raw`]) into this tally.
    fn add_raw(&mut self, a: &[u128], b: &[u128]) {
        self.add_raw_at(0, a, b);
    }

    /// Adds raw sums (format of [`Tally::raw`]) into bins `start .. start + a.len()`; the
    /// tally must not be a template (see [`Tally::zeroed_like`]).
    pub fn add_raw_at(&mut self, start: usize, a: &[u128], b: &[u128]) {
        assert_eq!(a.len(), b.len());
        assert!(start + a.len() <= self.len(), "raw sums past the last bin");
        match &mut self.store {
            Store::Dense { sums, .. } => {
                for k in 0..a.len() {
                    sums[start + k][0] += a[k];
                    sums[start + k][1] += b[k];
                }
            }
            Store::Shared { sums, .. } => {
                assert!(!sums.words.is_empty() || sums.bins == 0, "adding into a shared-tally template");
                for k in 0..a.len() {
                    add_saturating(&sums.words[start + k][0], shared_word(a[k], FRACTION_BITS - SHARED_SUM_BITS));
                    add_saturating(&sums.words[start + k][1], shared_word(b[k], FRACTION_BITS - SHARED_SUM2_BITS));
                }
            }
        }
    }

    /// The raw sums of bin `i` (format of [`Tally::raw`]), without copying the tally.
    #[inline]
    pub fn raw_bin(&self, i: usize) -> (u128, u128) {
        match &self.store {
            Store::Dense { sums, .. } => (sums[i][0], sums[i][1]),
            Store::Shared { sums, .. } => shared_raw(sums, i),
        }
    }

    /// The raw fixed-point sums in the 2⁻⁵⁰ format (for checkpoints and shard files), copied
    /// (exactly converted from a shared store). A saturated shared word comes out as u128::MAX.
    pub fn raw(&self) -> (Vec<u128>, Vec<u128>) {
        (0..self.len()).map(|i| self.raw_bin(i)).unzip()
    }

    /// A flushed dense tally from raw fixed-point sums.
    pub fn from_raw(sum: Vec<u128>, sum2: Vec<u128>) -> Self {
        assert_eq!(sum.len(), sum2.len());
        Self { store: Store::Dense { sums: sum.into_iter().zip(sum2).map(|(a, b)| [a, b]).collect(), pending: Pending::new() } }
    }

    /// Replaces the sums by raw ones (format of [`Tally::raw`]), keeping the store kind.
    pub fn load_raw(&mut self, sum: &[u128], sum2: &[u128]) {
        assert_eq!(sum.len(), self.len());
        assert_eq!(sum2.len(), self.len());
        *self = self.zeroed_like();
        self.add_raw(sum, sum2);
    }

    /// Number of bins whose sums saturated (their means read as NaN).
    pub fn saturated_bins(&self) -> usize {
        match &self.store {
            Store::Dense { .. } => 0,
            Store::Shared { sums, .. } => (0..sums.words.len()).filter(|&i| { let (a, b) = sums.words(i); a == u64::MAX || b == u64::MAX }).count(),
        }
    }

    /// Mean per history and its standard error for each bin, over `histories` histories.
    pub fn mean_and_sigma(&self, histories: u64) -> (Vec<f64>, Vec<f64>) {
        match &self.store {
            Store::Dense { sums, .. } => sums.iter().map(|[a, b]| bin_stats(from_fixed(*a), from_fixed(*b), histories)).unzip(),
            Store::Shared { sums, .. } => (0..sums.bins).map(|i| shared_bin_stats(sums, i, histories)).unzip(),
        }
    }

    /// The per-bin statistics of [`Tally::mean_and_sigma`] bin by bin, without building the
    /// whole vectors: a shared store is read in place (no copy of a large grid); a dense one is
    /// evaluated once.
    pub fn bin_stats_source(&self, histories: u64) -> BinStats {
        match &self.store {
            Store::Shared { sums, .. } => BinStats { histories, store: BinStatsStore::Shared(Arc::clone(sums)) },
            Store::Dense { .. } => {
                let (m, s) = self.mean_and_sigma(histories);
                BinStats { histories, store: BinStatsStore::Evaluated(Arc::new((m, s))) }
            }
        }
    }
}

/// The raw sums of a tally (format of [`Tally::raw`]), readable bin by bin without copying a
/// shared store (see [`Tally::raw_source`]); cheap to clone.
#[derive(Debug, Clone)]
pub struct RawSource {
    store: RawStore,
}

#[derive(Debug, Clone)]
enum RawStore {
    Shared(Arc<SharedSums>),
    Dense(Arc<Vec<[u128; 2]>>),
}

impl RawSource {
    /// Number of bins.
    pub fn len(&self) -> usize {
        match &self.store {
            RawStore::Shared(s) => s.bins,
            RawStore::Dense(v) => v.len(),
        }
    }

    /// True without bins.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// (Σx, Σx²) of bin `i`: the same values as [`Tally::raw_bin`].
    #[inline]
    pub fn get(&self, i: usize) -> (u128, u128) {
        match &self.store {
            RawStore::Shared(sums) => shared_raw(sums, i),
            RawStore::Dense(v) => (v[i][0], v[i][1]),
        }
    }
}

impl Tally {
    /// The raw sums for reading elsewhere (a shard file written block by block): a shared
    /// store is shared, not copied; a dense one (small) is copied once.
    pub fn raw_source(&self) -> RawSource {
        match &self.store {
            Store::Shared { sums, .. } => RawSource { store: RawStore::Shared(Arc::clone(sums)) },
            Store::Dense { sums, .. } => RawSource { store: RawStore::Dense(Arc::new(sums.clone())) },
        }
    }
}

/// Bin `i` of a shared store in the 2⁻⁵⁰ format of [`Tally::raw`] (exact; a saturated word
/// comes out as u128::MAX).
#[inline]
fn shared_raw(sums: &SharedSums, i: usize) -> (u128, u128) {
    let up = |v: u64, shift: i32| if v == u64::MAX { u128::MAX } else { (v as u128) << shift };
    let (a, b) = sums.words(i);
    (up(a, FRACTION_BITS - SHARED_SUM_BITS), up(b, FRACTION_BITS - SHARED_SUM2_BITS))
}

/// Mean and standard error of one bin from its sums over `histories` histories.
#[inline]
fn bin_stats(s: f64, s2: f64, histories: u64) -> (f64, f64) {
    let n = histories.max(1) as f64;
    let m = s / n;
    let m2 = s2 / n;
    let var = if histories > 1 { ((m2 - m * m) / (n - 1.0)).max(0.0) } else { 0.0 };
    (m, var.sqrt())
}

/// [`bin_stats`] of bin `i` of a shared store; NaN for a saturated bin.
#[inline]
fn shared_bin_stats(sums: &SharedSums, i: usize, histories: u64) -> (f64, f64) {
    let (a, b) = sums.words(i);
    if a == u64::MAX || b == u64::MAX {
        (f64::NAN, f64::NAN)
    } else {
        bin_stats(a as f64 / SHARED_SUM_SCALE, b as f64 / SHARED_SUM2_SCALE, histories)
    }
}

/// Per-bin mean and standard error of a tally, readable bin by bin (see
/// [`Tally::bin_stats_source`]); cheap to clone, shares the tally's sums.
#[derive(Debug, Clone)]
pub struct BinStats {
    histories: u64,
    store: BinStatsStore,
}

#[derive(Debug, Clone)]
enum BinStatsStore {
    Shared(Arc<SharedSums>),
    Evaluated(Arc<(Vec<f64>, Vec<f64>)>),
}

impl BinStats {
    /// (mean, standard error) of bin `i`: the same bits as [`Tally::mean_and_sigma`] gives.
    #[inline]
    pub fn get(&self, i: usize) -> (f64, f64) {
        match &self.store {
            BinStatsStore::Shared(sums) => shared_bin_stats(sums, i, self.histories),
            BinStatsStore::Evaluated(v) => (v.0[i], v.1[i]),
        }
    }
}

/// A 2⁻⁵⁰ fixed-point sum as a shared word (`shift` fewer fractional bits), rounded to nearest;
/// saturates.
fn shared_word(v: u128, shift: i32) -> u64 {
    if v == u128::MAX {
        return u64::MAX;
    }
    let r = (v + (1u128 << (shift - 1))) >> shift;
    u64::try_from(r).unwrap_or(u64::MAX)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The standard error of a per-history score equals the textbook sample formula
    /// s/√n computed directly from the per-history values.
    #[test]
    fn history_by_history_statistics_match_direct_computation() {
        let mut rng = crate::rng::history_stream(3, 0);
        let n = 10_000u64;
        let mut t = Tally::new(2);
        let mut values = Vec::new();
        for h in 0..n {
            // Several contributions per history, sometimes none.
            let mut total = 0.0;
            for _ in 0..(h % 3) {
                let v = rng.uniform() * 10.0;
                t.add(1, v, h);
                total += v;
            }
            values.push(total);
        }
        t.flush();
        let (m, s) = t.mean_and_sigma(n);
        let mean = values.iter().sum::<f64>() / n as f64;
        let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n as f64 - 1.0);
        assert!((m[1] - mean).abs() < 1e-9 * mean);
        assert!((s[1] - (var / n as f64).sqrt()).abs() < 1e-6 * s[1]);
        assert_eq!(m[0], 0.0);
    }

    #[test]
    fn merging_is_order_independent_bit_for_bit() {
        let mut parts: Vec<Tally> = (0..5)
            .map(|k| {
                let mut t = Tally::new(3);
                let mut rng = crate::rng::history_stream(9, k);
                for h in 0..100 {
                    t.add((h % 3) as usize, rng.uniform() * 1e3, h + 1000 * k);
                }
                t.flush();
                t
            })
            .collect();
        let mut a = Tally::new(3);
        for p in &parts {
            a.merge(p);
        }
        parts.reverse();
        let mut b = Tally::new(3);
        for p in &parts {
            b.merge(p);
        }
        assert_eq!(a.raw(), b.raw());
    }

    /// Direct computation of mean and standard error from per-history values.
    fn direct(values: &[f64]) -> (f64, f64) {
        let n = values.len() as f64;
        let mean = values.iter().sum::<f64>() / n;
        let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0);
        (mean, (var / n).sqrt())
    }

    /// The shared store gives the textbook mean and standard error (to its resolution), with
    /// several contributions per history landing in one bin and histories spread over bins.
    #[test]
    fn shared_store_matches_direct_statistics() {
        let mut rng = crate::rng::history_stream(4, 0);
        let n = 20_000u64;
        let mut t = Tally::shared(3);
        let mut values = vec![Vec::new(); 3];
        for h in 0..n {
            let mut total = [0.0; 3];
            for k in 0..(h % 4) {
                let bin = ((h + k) % 3) as usize;
                let v = rng.uniform() * 50.0;
                t.add(bin, v, h);
                total[bin] += v;
            }
            for b in 0..3 {
                values[b].push(total[b]);
            }
        }
        t.flush();
        let (m, s) = t.mean_and_sigma(n);
        for b in 0..3 {
            let (mean, sigma) = direct(&values[b]);
            assert!((m[b] - mean).abs() < 1e-6 * mean, "bin {b}: {} vs {mean}", m[b]);
            assert!((s[b] - sigma).abs() < 1e-4 * sigma, "bin {b}: {} vs {sigma}", s[b]);
        }
    }

    /// Values far below the 2⁻²⁴ resolution still sum without bias (dithered rounding): the
    /// error of the sum of n dithered values is at most n·2⁻²⁴ in the worst case and of order
    /// √n·2⁻²⁴ in expectation; 6σ of the uniform rounding error (σ² = n/12 units²) bounds it.
    #[test]
    fn shared_store_rounding_is_unbiased_for_tiny_values() {
        let n = 200_000u64;
        let mut t = Tally::shared(1);
        let v = 3.3e-9; // about 0.055 of a unit of 2⁻²⁴
        for h in 0..n {
            t.add(0, v, h);
        }
        t.flush();
        let (m, _) = t.mean_and_sigma(n);
        let unit = 1.0 / SHARED_SUM_SCALE;
        let bound = 6.0 * (n as f64 / 12.0).sqrt() * unit / n as f64;
        assert!((m[0] - v).abs() < bound, "mean {} vs {v} (bound {bound})", m[0]);
    }

    /// Workers adding their histories to one shared store in any interleaving give the same bits
    /// as one worker adding them in order.
    #[test]
    fn shared_store_is_order_and_thread_independent() {
        let work = |h: u64| -> Vec<(usize, f64)> {
            let mut rng = crate::rng::history_stream(11, h);
            (0..(1 + h % 5)).map(|_| ((rng.uniform() * 7.0) as usize, rng.uniform() * 80.0)).collect()
        };
        let serial = Tally::shared(7);
        let mut w = serial.worker_view();
        for h in 0..4000 {
            for (b, v) in work(h) {
                w.add(b, v, h);
            }
        }
        w.flush();
        let parallel = Tally::shared(7);
        std::thread::scope(|sc| {
            for k in 0..3u64 {
                let mut w = parallel.worker_view();
                sc.spawn(move || {
                    // Histories k, k+3, … in reverse order.
                    let mut hs: Vec<u64> = (0..4000).filter(|h| h % 3 == k).collect();
                    hs.reverse();
                    for h in hs {
                        for (b, v) in work(h) {
                            w.add(b, v, h);
                        }
                    }
                    w.flush();
                });
            }
        });
        assert_eq!(serial.raw(), parallel.raw());
        // Merging the run's own view adds nothing; merging another store adds it.
        let mut acc = parallel.zeroed_like();
        acc.merge(&parallel);
        acc.merge(&acc.worker_view());
        assert_eq!(acc.raw(), parallel.raw());
    }

    /// raw() and load_raw() round-trip a shared store exactly, and a dense copy of it gives the
    /// same statistics.
    #[test]
    fn shared_store_raw_round_trip() {
        let mut t = Tally::shared(2);
        for h in 0..1000u64 {
            t.add((h % 2) as usize, (h as f64).sqrt(), h);
        }
        t.flush();
        let (a, b) = t.raw();
        let mut u = Tally::shared_template(2).zeroed_like();
        u.load_raw(&a, &b);
        assert_eq!(t.raw(), u.raw());
        let d = Tally::from_raw(a, b);
        assert_eq!(d.mean_and_sigma(1000), t.mean_and_sigma(1000));
    }

    /// A bin whose sum would pass 2⁶⁴ units saturates and reads as NaN, never as a wrapped value.
    #[test]
    fn shared_store_saturates_to_nan() {
        let mut t = Tally::shared(2);
        let big = 2.0e11; // keV; (2e11)² · 2¹⁶ overflows the squares' word at once
        t.add(0, big, 0);
        t.add(1, 1.0, 0);
        t.flush();
        assert_eq!(t.saturated_bins(), 1);
        let (m, s) = t.mean_and_sigma(2);
        assert!(m[0].is_nan() && s[0].is_nan());
        assert!((m[1] - 0.5).abs() < 1e-6);
    }
}

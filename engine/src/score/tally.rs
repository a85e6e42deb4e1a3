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

/// Fractional bits of the fixed-point sums.
pub const FRACTION_BITS: i32 = 50;
const SCALE: f64 = (1u64 << FRACTION_BITS) as f64;

#[inline(always)]
fn to_fixed(v: f64) -> u128 {
    // Scores are non-negative; a negative value would be a bug upstream.
    debug_assert!(v >= 0.0, "negative score contribution {v}");
    (v * SCALE + 0.5) as u128
}

#[inline(always)]
fn from_fixed(v: u128) -> f64 {
    v as f64 / SCALE
}

const NO_HISTORY: u64 = u64::MAX;

/// A set of bins scored history by history.
#[derive(Debug, Clone, PartialEq)]
pub struct Tally {
    sum: Vec<u128>,
    sum2: Vec<u128>,
    current: Vec<f64>,
    last: Vec<u64>,
}

impl Tally {
    /// A zeroed tally of `bins` bins.
    pub fn new(bins: usize) -> Self {
        Self { sum: vec![0; bins], sum2: vec![0; bins], current: vec![0.0; bins], last: vec![NO_HISTORY; bins] }
    }

    /// Number of bins.
    pub fn len(&self) -> usize {
        self.sum.len()
    }

    /// True for a tally without bins.
    pub fn is_empty(&self) -> bool {
        self.sum.is_empty()
    }

    /// Adds `value` to bin `bin` for history `history`.
    #[inline(always)]
    pub fn add(&mut self, bin: usize, value: f64, history: u64) {
        if self.last[bin] != history {
            self.fold(bin);
            self.last[bin] = history;
        }
        self.current[bin] += value;
    }

    #[inline(always)]
    fn fold(&mut self, bin: usize) {
        let c = self.current[bin];
        if c != 0.0 {
            self.sum[bin] += to_fixed(c);
            self.sum2[bin] += to_fixed(c * c);
            self.current[bin] = 0.0;
        }
    }

    /// Folds every pending history total into the sums.
    pub fn flush(&mut self) {
        for bin in 0..self.sum.len() {
            self.fold(bin);
            self.last[bin] = NO_HISTORY;
        }
    }

    /// Adds another (flushed) tally of the same shape into this one.
    pub fn merge(&mut self, other: &Tally) {
        assert_eq!(self.sum.len(), other.sum.len(), "merging tallies of different shapes");
        for i in 0..self.sum.len() {
            self.sum[i] += other.sum[i];
            self.sum2[i] += other.sum2[i];
        }
    }

    /// The raw fixed-point sums (for checkpoints and shard files).
    pub fn raw(&self) -> (&[u128], &[u128]) {
        (&self.sum, &self.sum2)
    }

    /// A flushed tally from raw fixed-point sums.
    pub fn from_raw(sum: Vec<u128>, sum2: Vec<u128>) -> Self {
        let n = sum.len();
        assert_eq!(n, sum2.len());
        Self { sum, sum2, current: vec![0.0; n], last: vec![NO_HISTORY; n] }
    }

    /// Mean per history and its standard error for each bin, over `histories` histories.
    pub fn mean_and_sigma(&self, histories: u64) -> (Vec<f64>, Vec<f64>) {
        let n = histories.max(1) as f64;
        let mut mean = Vec::with_capacity(self.sum.len());
        let mut sigma = Vec::with_capacity(self.sum.len());
        for i in 0..self.sum.len() {
            let m = from_fixed(self.sum[i]) / n;
            let m2 = from_fixed(self.sum2[i]) / n;
            let var = if histories > 1 { ((m2 - m * m) / (n - 1.0)).max(0.0) } else { 0.0 };
            mean.push(m);
            sigma.push(var.sqrt());
        }
        (mean, sigma)
    }
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
}

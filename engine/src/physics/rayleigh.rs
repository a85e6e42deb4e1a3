//! Coherent (Rayleigh) scattering: the Thomson angular distribution times the square of the
//! atomic form factor, dσ/dΩ = (r_e²/2)(1 + cos²θ) F²(x,Z), x = sin(θ/2)/λ.
//!
//! Sampling: with u = x² and u_max = (E/hc)², cos θ = 1 − 2u/u_max, so
//! dσ ∝ (1 + cos²θ)/2 · F²(u) du. We tabulate the cumulative A(u) = ∫₀ᵘ F²(u') du' per element,
//! draw u from F² on [0, u_max] by inverting A (piecewise-linear A, i.e. F² taken constant inside
//! each of ~2000 log-spaced intervals, ~1 % wide), and accept with probability (1 + cos²θ)/2.
//! The coherent cross section the engine uses comes from the same F (see xsdata), so the choice
//! of interaction and the angular distribution agree.

use dosemill_xsdata::{Element, CLASSICAL_ELECTRON_RADIUS_CM, E_MAX_KEV, HC_KEV_ANGSTROM};

const NODES: usize = 2048;
const U_MIN: f64 = 1e-6;

/// The cumulative table of F² in u = x² for one element.
#[derive(Debug, Clone)]
pub struct RayleighTable {
    /// u nodes (1/Å²): 0, then log-uniform from `U_MIN` to above (E_max/hc)².
    u: Vec<f64>,
    /// A(u) at the nodes.
    cum: Vec<f64>,
    ln_u1: f64,
    inv_step: f64,
    /// For each bucket of [`u_bucket_of`] from u[1] up: an interval index at or below every u
    /// of the bucket (the interval search then needs no logarithm).
    u_bucket_first: Vec<u32>,
    /// Guide table of the inversion: for each of `GUIDE` equal bins of A in [0, A(u_last)], the
    /// last node i with A(u_i) ≤ the bin's start (where the search starts).
    guide: Vec<u32>,
    /// GUIDE / A(u_last).
    guide_scale: f64,
}

/// Bins of the guide table.
const GUIDE: usize = 2048;
/// Leading mantissa bits of u used by [`u_bucket_of`]: 2⁷ buckets per octave (nodes are ~1 % apart).
const U_BUCKET_MANTISSA_BITS: u32 = 7;

/// Bucket of u > 0 relative to `u_first`: exponent and leading mantissa bits of u minus those
/// of `u_first`; monotone in u, 0 at or below u_first.
#[inline]
fn u_bucket_of(uu: f64, u_first: f64) -> usize {
    let shift = 52 - U_BUCKET_MANTISSA_BITS;
    ((uu.to_bits() >> shift) as usize).saturating_sub((u_first.to_bits() >> shift) as usize)
}

impl RayleighTable {
    /// Builds the table from the element's form factor (Simpson's rule on each interval).
    pub fn new(element: &Element) -> Self {
        let u_max = (E_MAX_KEV / HC_KEV_ANGSTROM).powi(2) * 1.001;
        let ln_u1 = U_MIN.ln();
        let step = (u_max.ln() - ln_u1) / (NODES - 2) as f64;
        let mut u = Vec::with_capacity(NODES);
        u.push(0.0);
        for i in 0..NODES - 1 {
            u.push((ln_u1 + step * i as f64).exp());
        }
        let f2 = |uu: f64| element.form_factor(uu.sqrt()).powi(2);
        let mut cum = Vec::with_capacity(NODES);
        cum.push(0.0);
        for i in 1..NODES {
            let (a, b) = (u[i - 1], u[i]);
            let mid = 0.5 * (a + b);
            let area = (b - a) / 6.0 * (f2(a) + 4.0 * f2(mid) + f2(b));
            cum.push(cum[i - 1] + area);
        }
        let shift = 52 - U_BUCKET_MANTISSA_BITS;
        let n_buckets = u_bucket_of(u[NODES - 1], u[1]) + 1;
        let first_bits = (u[1].to_bits() >> shift) << shift;
        let mut u_bucket_first = Vec::with_capacity(n_buckets);
        let mut i = 1usize;
        for b in 0..n_buckets {
            // Smallest f64 of bucket b (bucket 0 starts at u[1] itself).
            let start = if b == 0 { u[1] } else { f64::from_bits(first_bits + ((b as u64) << shift)) };
            while i + 2 < NODES && u[i + 1] <= start {
                i += 1;
            }
            u_bucket_first.push(i as u32);
        }
        let total = cum[NODES - 1];
        let guide_scale = if total > 0.0 { GUIDE as f64 / total } else { 0.0 };
        let mut guide = Vec::with_capacity(GUIDE);
        let mut i = 0usize;
        for j in 0..GUIDE {
            let start = j as f64 / guide_scale;
            while i + 1 < NODES && cum[i + 1] <= start {
                i += 1;
            }
            guide.push(i as u32);
        }
        Self { u, cum, ln_u1, inv_step: 1.0 / step, u_bucket_first, guide, guide_scale }
    }

    /// [`Self::interval`] without a logarithm (the same index for every u; tested).
    #[inline]
    fn interval_bits(&self, uu: f64) -> usize {
        if uu < self.u[1] {
            return 0;
        }
        let b = u_bucket_of(uu, self.u[1]).min(self.u_bucket_first.len() - 1);
        let mut i = self.u_bucket_first[b] as usize;
        while i + 2 < NODES && self.u[i + 1] <= uu {
            i += 1;
        }
        i
    }

    /// The last node `lo` ≤ `i_max` with A(u_lo) ≤ `target`: what a bisection of the nodes
    /// 0..=i_max finds (A is non-decreasing), started from the guide table.
    #[inline]
    fn invert(&self, target: f64, i_max: usize) -> usize {
        let j = ((target * self.guide_scale) as usize).min(GUIDE - 1);
        let mut lo = (self.guide[j] as usize).min(i_max);
        while lo > 0 && self.cum[lo] > target {
            lo -= 1;
        }
        while lo < i_max && self.cum[lo + 1] <= target {
            lo += 1;
        }
        lo
    }

    /// The bisection [`Self::invert`] replaces (kept for its test).
    #[cfg(test)]
    fn invert_by_bisection(&self, target: f64, i_max: usize) -> usize {
        let (mut lo, mut hi) = (0usize, i_max + 1);
        while hi - lo > 1 {
            let mid = (lo + hi) / 2;
            if self.cum[mid] <= target {
                lo = mid;
            } else {
                hi = mid;
            }
        }
        lo
    }

    /// Index i of the interval [u_i, u_{i+1}] holding `uu`.
    #[inline]
    fn interval(&self, uu: f64) -> usize {
        if uu < self.u[1] {
            return 0;
        }
        let i = ((uu.ln() - self.ln_u1) * self.inv_step) as usize + 1;
        let mut i = i.min(NODES - 2);
        // Guard against rounding at the node itself.
        while i > 0 && self.u[i] > uu {
            i -= 1;
        }
        while i + 2 < NODES && self.u[i + 1] <= uu {
            i += 1;
        }
        i
    }

    /// A(u), piecewise linear between nodes.
    #[inline]
    pub fn cumulative(&self, uu: f64) -> f64 {
        let i = self.interval(uu);
        let t = (uu - self.u[i]) / (self.u[i + 1] - self.u[i]);
        self.cum[i] + t * (self.cum[i + 1] - self.cum[i])
    }

    /// Samples cos θ for coherent scattering of a `kev` photon.
    #[inline]
    pub fn sample(&self, kev: f64, rng: &mut crate::rng::Stream) -> f64 {
        let u_max = (kev / HC_KEV_ANGSTROM).powi(2);
        let i_max = self.interval_bits(u_max);
        // A(u_max), as `cumulative` computes it.
        let t_max = (u_max - self.u[i_max]) / (self.u[i_max + 1] - self.u[i_max]);
        let a_max = self.cum[i_max] + t_max * (self.cum[i_max + 1] - self.cum[i_max]);
        loop {
            let target = rng.uniform() * a_max;
            let lo = self.invert(target, i_max);
            let span = self.cum[lo + 1] - self.cum[lo];
            let t = if span > 0.0 { (target - self.cum[lo]) / span } else { 0.0 };
            let uu = (self.u[lo] + t * (self.u[lo + 1] - self.u[lo])).min(u_max);
            let cos_theta = 1.0 - 2.0 * uu / u_max;
            if 2.0 * rng.uniform() <= 1.0 + cos_theta * cos_theta {
                return cos_theta;
            }
        }
    }

    /// The coherent cross section per atom (cm²) implied by this table:
    /// σ = π r_e² (2/u_max) ∫₀^{u_max} (1 + cos²θ(u)) F²(u) du, integrated over the table.
    pub fn cross_section_cm2(&self, kev: f64) -> f64 {
        let u_max = (kev / HC_KEV_ANGSTROM).powi(2);
        let i_max = self.interval(u_max);
        let mut sum = 0.0;
        for i in 0..=i_max {
            let a = self.u[i];
            let b = self.u[i + 1].min(u_max);
            if b <= a {
                continue;
            }
            let density = (self.cum[i + 1] - self.cum[i]) / (self.u[i + 1] - self.u[i]);
            // ∫ (1 + c²) du with c = 1 − 2u/u_max, exactly, times the constant F² of the interval.
            let g = |uu: f64| {
                let c = 1.0 - 2.0 * uu / u_max;
                uu - u_max / 6.0 * c * c * c
            };
            sum += density * (g(b) - g(a));
        }
        std::f64::consts::PI * CLASSICAL_ELECTRON_RADIUS_CM.powi(2) * 2.0 / u_max * sum
    }
}

/// The differential cross section per atom dσ/dΩ (cm²/sr) from the form factor directly.
pub fn dsigma_domega_cm2(kev: f64, cos_theta: f64, element: &Element) -> f64 {
    let x = kev / HC_KEV_ANGSTROM * (0.5 * (1.0 - cos_theta)).max(0.0).sqrt();
    0.5 * CLASSICAL_ELECTRON_RADIUS_CM.powi(2) * (1.0 + cos_theta * cos_theta) * element.form_factor(x).powi(2)
}

#[cfg(test)]
mod tests {
    use super::*;
    use dosemill_xsdata::elements;

    /// The logarithm-free interval search and the guide-table inversion give the indices of
    /// the logarithmic search and of bisection: at every node and its float neighbours, at
    /// 100,000 spread u, and for 100,000 targets at several energies (H, O, Pb; H has F² = 0
    /// over the top of the grid, so A is flat there).
    #[test]
    fn fast_searches_match_the_reference_searches() {
        for z in [1, 8, 82] {
            let t = RayleighTable::new(elements().get(z).unwrap());
            let mut probes = vec![0.0, 1e-9];
            for &node in &t.u[1..] {
                probes.extend([node, f64::from_bits(node.to_bits() - 1), f64::from_bits(node.to_bits() + 1)]);
            }
            let last = t.u[NODES - 1];
            for k in 0..100_000 {
                probes.push((t.ln_u1 + (last.ln() * 1.01 - t.ln_u1) * (k as f64 + 0.5) / 100_000.0).exp());
            }
            for uu in probes {
                assert_eq!(t.interval_bits(uu), t.interval(uu), "Z={z} u={uu}");
            }
            for kev in [1.0, 10.0, 33.17, 60.0, 150.0, 800.0] {
                let u_max = (kev / HC_KEV_ANGSTROM).powi(2);
                let i_max = t.interval(u_max);
                let a_max = t.cumulative(u_max);
                let mut targets: Vec<f64> = (0..100_000).map(|k| a_max * k as f64 / 100_000.0).collect();
                for &c in &t.cum[..=i_max + 1] {
                    targets.extend([c, f64::from_bits(c.to_bits().saturating_sub(1)), f64::from_bits(c.to_bits() + 1)]);
                }
                for target in targets.into_iter().filter(|x| *x < a_max) {
                    assert_eq!(t.invert(target, i_max), t.invert_by_bisection(target, i_max), "Z={z} {kev} keV target={target}");
                }
            }
        }
    }
}

//! The majorant cross section for Woodcock (delta) tracking in a voxel grid:
//! μ_max(E) = max over materials m of (μ/ρ)_m(E) · ρ_max(m), ρ_max(m) the largest density of
//! any voxel of material m.
//!
//! Tabulated on the union of the materials' energy nodes. Each material's ln μ is linear in ln E
//! between consecutive union nodes (its own nodes are among them), so the maximum is convex
//! there and its chord — the log-log interpolation of the node maxima — lies on or above it:
//! the table is a true majorant, not an approximation. At each node the materials are evaluated
//! at the node and a hair to either side (so an edge is never attributed to the wrong side by
//! rounding), and a 1e-6 relative margin covers the rounding of the interpolation itself.

use super::xs::{Lookup, MaterialXs};

/// The tabulated majorant (1/cm).
#[derive(Debug, Clone)]
pub struct Majorant {
    ln_e: Vec<f64>,
    ln_mu: Vec<f64>,
    bucket: Vec<u32>,
    ln_e0: f64,
    inv_step: f64,
}

impl Majorant {
    /// Builds the majorant of `materials` with the largest density of each (g/cm³; 0 or NaN for
    /// a material absent from the grid).
    pub fn new(materials: &[MaterialXs], max_density_g_cm3: &[f64]) -> Self {
        let mut nodes: Vec<(f64, bool)> = Vec::new();
        for (m, t) in materials.iter().enumerate() {
            if !(max_density_g_cm3.get(m).copied().unwrap_or(0.0) > 0.0) {
                continue;
            }
            let e = t.nodes_kev();
            for k in 0..e.len() {
                let below = k + 1 < e.len() && e[k + 1] == e[k];
                nodes.push((e[k], below));
            }
        }
        nodes.sort_by(|a, b| a.0.partial_cmp(&b.0).unwrap().then(b.1.cmp(&a.1)));
        nodes.dedup_by(|b, a| a.0 == b.0 && a.1 == b.1);
        if nodes.len() < 2 {
            nodes = vec![(dosemill_xsdata::E_MIN_KEV, false), (dosemill_xsdata::E_MAX_KEV, false)];
        }
        let mut ln_e = Vec::with_capacity(nodes.len());
        let mut ln_mu = Vec::with_capacity(nodes.len());
        for &(e, below) in &nodes {
            let lo = (e * (1.0 - 1e-9)).max(dosemill_xsdata::E_MIN_KEV);
            let hi = (e * (1.0 + 1e-9)).min(dosemill_xsdata::E_MAX_KEV);
            let probes: [f64; 2] = if below { [lo, e * (1.0 - 1e-12)] } else { [e, hi] };
            let mut mx = 1e-300f64;
            for (m, t) in materials.iter().enumerate() {
                let rho = max_density_g_cm3.get(m).copied().unwrap_or(0.0);
                if rho > 0.0 {
                    for p in probes {
                        mx = mx.max(t.mu_rho_cm2_g(p) * rho);
                    }
                }
            }
            ln_e.push(e.ln());
            ln_mu.push(mx.ln() + 1e-6);
        }
        let ln_e0 = ln_e[0];
        let n_base = 2000usize;
        let step = (ln_e[ln_e.len() - 1] - ln_e0) / n_base as f64;
        let mut bucket = Vec::with_capacity(n_base);
        let mut i = 0usize;
        for b in 0..n_base {
            let start = ln_e0 + step * b as f64;
            while i + 2 < ln_e.len() && ln_e[i + 1] <= start {
                i += 1;
            }
            bucket.push(i as u32);
        }
        Self { ln_e, ln_mu, bucket, ln_e0, inv_step: 1.0 / step }
    }

    /// μ_max (1/cm) at an energy given by its logarithm.
    #[inline(always)]
    pub fn mu_per_cm_ln(&self, ln_kev: f64) -> f64 {
        let b = (((ln_kev - self.ln_e0) * self.inv_step).max(0.0) as usize).min(self.bucket.len() - 1);
        let mut i = self.bucket[b] as usize;
        let last = self.ln_e.len() - 2;
        while i < last && self.ln_e[i + 1] <= ln_kev {
            i += 1;
        }
        let t = (ln_kev - self.ln_e[i]) / (self.ln_e[i + 1] - self.ln_e[i]);
        (self.ln_mu[i] + t * (self.ln_mu[i + 1] - self.ln_mu[i])).exp()
    }
}

/// Local majorants of a voxel grid's bricks at one photon energy, computed on first use and
/// kept while the energy does not change (see `dosemill_geometry::BrickMedium`).
///
/// A uniform stretch's majorant is its own μ; a class's is max over its (material m, density
/// ρ_m) list of (μ/ρ)_m(E) · ρ_m. Both use the very μ/ρ the tracking compares against
/// ([`MaterialXs::mu_rho_at`] of [`MaterialXs::lookup_ln`]), so the bound holds bit for bit,
/// with no margin. Materials and classes with index ≥ 64 are computed each time, not kept.
#[derive(Debug, Clone)]
pub struct LocalMajorants {
    kev_bits: u64,
    material_known: u64,
    class_known: u64,
    mu_rho: [f64; 64],
    lookup: [Lookup; 64],
    class_mu: [f64; 64],
}

impl Default for LocalMajorants {
    fn default() -> Self {
        Self::new()
    }
}

impl LocalMajorants {
    /// Nothing known yet.
    pub fn new() -> Self {
        LocalMajorants { kev_bits: u64::MAX, material_known: 0, class_known: 0, mu_rho: [0.0; 64], lookup: [Lookup::default(); 64], class_mu: [0.0; 64] }
    }

    /// Forgets the values when `kev` is not the energy they were computed at.
    #[inline(always)]
    pub fn at_energy(&mut self, kev: f64) {
        if kev.to_bits() != self.kev_bits {
            self.kev_bits = kev.to_bits();
            self.material_known = 0;
            self.class_known = 0;
        }
    }

    /// μ/ρ (cm²/g) of material `m` at the current energy (ln given).
    #[inline(always)]
    pub fn mu_rho(&mut self, m: u16, ln_kev: f64, materials: &[MaterialXs]) -> f64 {
        let bit = 1u64.checked_shl(m as u32).unwrap_or(0);
        if self.material_known & bit != 0 {
            return self.mu_rho[m as usize];
        }
        let t = &materials[m as usize];
        let at = t.lookup_ln(ln_kev);
        let v = t.mu_rho_at(at);
        if bit != 0 {
            self.mu_rho[m as usize] = v;
            self.lookup[m as usize] = at;
            self.material_known |= bit;
        }
        v
    }

    /// The table lookup of material `m` at the current energy and its μ/ρ, if kept (after
    /// [`LocalMajorants::mu_rho`] of an index < 64).
    #[inline(always)]
    pub fn kept(&self, m: u16) -> Option<(Lookup, f64)> {
        let bit = 1u64.checked_shl(m as u32).unwrap_or(0);
        (self.material_known & bit != 0).then(|| (self.lookup[m as usize], self.mu_rho[m as usize]))
    }

    /// The majorant (1/cm) of class `c` with its (material, largest density) list.
    #[inline(always)]
    pub fn class_mu(&mut self, c: u16, list: &[(u16, f64)], ln_kev: f64, materials: &[MaterialXs]) -> f64 {
        let bit = 1u64.checked_shl(c as u32).unwrap_or(0);
        if self.class_known & bit != 0 {
            return self.class_mu[c as usize];
        }
        let mut mx = 0.0f64;
        for &(m, rho) in list {
            mx = mx.max(self.mu_rho(m, ln_kev, materials) * rho);
        }
        if bit != 0 {
            self.class_mu[c as usize] = mx;
            self.class_known |= bit;
        }
        mx
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::physics::PhysicsOptions;

    /// The majorant is never below any material's μ (lead, lung-density tissue, bone), and equals
    /// the largest of them at the nodes, checked at 20,000 energies (including edge neighbourhoods).
    #[test]
    fn majorant_bounds_every_material() {
        let o = PhysicsOptions::default();
        let mats = vec![
            MaterialXs::new("water", 1.0, &[(1, 0.111894), (8, 0.888106)], &o).unwrap(),
            MaterialXs::new("lead", 11.35, &[(82, 1.0)], &o).unwrap(),
            MaterialXs::new("bone", 1.92, &[(1, 0.034), (6, 0.155), (8, 0.435), (15, 0.103), (20, 0.225), (12, 0.048)], &o).unwrap(),
        ];
        let rho = [1.05, 11.35, 1.92];
        let m = Majorant::new(&mats, &rho);
        let mut worst = f64::INFINITY;
        for k in 0..20_000 {
            let kev = (1.0f64.ln() + (800f64).ln() * (k as f64 + 0.5) / 20_000.0).exp();
            let mx = (0..3).map(|i| mats[i].mu_rho_cm2_g(kev) * rho[i]).fold(0.0, f64::max);
            let r = m.mu_per_cm_ln(kev.ln()) / mx;
            worst = worst.min(r);
            assert!(r >= 1.0, "{kev} keV: majorant {} < {mx}", m.mu_per_cm_ln(kev.ln()));
        }
        assert!(worst < 1.0 + 1e-5, "majorant is not tight anywhere: min ratio {worst}");
    }
}

//! Per-material cross-section tables for the transport loop.
//!
//! Built once per material from the element tables (Bragg additivity). The energy grid is
//! log-uniform (200 nodes per decade over 1–800 keV) plus every absorption edge of every
//! constituent element as a duplicated energy (value below, value above). A lookup is a direct
//! index into the log-uniform buckets followed by a short forward step over edge nodes: no
//! binary search. Values are interpolated log-log.
//!
//! For the choice of interaction the table stores, per node, the logarithms of the cumulative
//! partial mass cross sections over channels (component × {photo, incoherent, coherent}); the
//! last cumulative is the total μ/ρ used for tracking, so the distance sampled and the channel
//! chosen come from one consistent set of numbers. Log-log interpolation keeps the cumulative
//! sums ordered, so one forward scan over the channels picks the interaction.

use super::rayleigh::RayleighTable;
use super::{klein_nishina, Interaction, PhysicsOptions};
use dosemill_xsdata::{elements, Element, XsError, AVOGADRO, E_MAX_KEV, E_MIN_KEV};

const NODES_PER_DECADE: f64 = 200.0;
const LN_FLOOR: f64 = -690.0; // ln(1e-300): stands for a zero cross section

/// One element of a material.
#[derive(Debug, Clone)]
pub struct Component {
    /// The element's data.
    pub element: &'static Element,
    /// Mass fraction in the material.
    pub mass_fraction: f64,
    /// Coherent sampling table (built only when coherent scattering is on).
    pub rayleigh: Option<RayleighTable>,
}

/// Errors building a material table.
#[derive(Debug, thiserror::Error)]
pub enum TableError {
    /// A data lookup failed.
    #[error(transparent)]
    Data(#[from] XsError),
    /// The composition is empty or its fractions do not sum to one.
    #[error("material `{name}`: mass fractions sum to {sum}, expected 1")]
    Composition {
        /// Material name.
        name: String,
        /// Their sum.
        sum: f64,
    },
}

/// Cross-section table of one material (mass cross sections, cm²/g).
#[derive(Debug, Clone)]
pub struct MaterialXs {
    /// Material name.
    pub name: String,
    /// Nominal mass density (g/cm³).
    pub density_g_cm3: f64,
    /// Constituent elements.
    pub components: Vec<Component>,
    ln_e: Vec<f64>,
    bucket: Vec<u32>,
    ln_e0: f64,
    inv_step: f64,
    channels: usize,
    /// ln of cumulative partial μ/ρ, node-major: `ln_cum[node * channels + j]`.
    ln_cum: Vec<f64>,
}

impl MaterialXs {
    /// Builds the table for a composition given as (Z, mass fraction), fractions summing to 1.
    pub fn new(
        name: &str,
        density_g_cm3: f64,
        composition: &[(u32, f64)],
        options: &PhysicsOptions,
    ) -> Result<Self, TableError> {
        let sum: f64 = composition.iter().map(|c| c.1).sum();
        if composition.is_empty() || (sum - 1.0).abs() > 1e-6 {
            return Err(TableError::Composition { name: name.to_string(), sum });
        }
        let table = elements();
        let mut components = Vec::with_capacity(composition.len());
        for &(z, w) in composition {
            let element = table.get(z)?;
            let rayleigh = options.rayleigh.then(|| RayleighTable::new(element));
            components.push(Component { element, mass_fraction: w, rayleigh });
        }

        // Energy nodes: log-uniform base plus duplicated edges.
        let ln_e0 = E_MIN_KEV.ln();
        let ln_e1 = E_MAX_KEV.ln();
        let n_base = ((ln_e1 - ln_e0) / std::f64::consts::LN_10 * NODES_PER_DECADE).ceil() as usize;
        let step = (ln_e1 - ln_e0) / n_base as f64;
        let mut nodes: Vec<(f64, bool)> = (0..=n_base).map(|i| ((ln_e0 + step * i as f64).exp(), false)).collect();
        nodes.last_mut().unwrap().0 = E_MAX_KEV;
        for c in &components {
            for &edge in c.element.edges_kev() {
                if edge > E_MIN_KEV && edge < E_MAX_KEV {
                    nodes.push((edge, true)); // below
                    nodes.push((edge, false)); // above
                }
            }
        }
        // Sort by energy; at equal energy the "below" node first. Remove base nodes coinciding with an edge.
        nodes.sort_by(|a, b| a.0.partial_cmp(&b.0).unwrap().then(b.1.cmp(&a.1)));
        nodes.dedup_by(|b, a| a.0 == b.0 && a.1 == b.1);

        let channels = 3 * components.len();
        let mut ln_e = Vec::with_capacity(nodes.len());
        let mut ln_cum = Vec::with_capacity(nodes.len() * channels);
        for &(e, below) in &nodes {
            let eval = if below { e * (1.0 - 1e-9) } else { e };
            ln_e.push(e.ln());
            let mut acc = 0.0;
            for c in &components {
                for kind in [Interaction::Photoelectric, Interaction::Incoherent, Interaction::Coherent] {
                    acc += c.mass_fraction * element_partial(c.element, kind, eval, options);
                    ln_cum.push(if acc > 0.0 { acc.ln().max(LN_FLOOR) } else { LN_FLOOR });
                }
            }
        }
        // Buckets: bucket b covers [E0·e^{b·step}, E0·e^{(b+1)·step}); store the last node at or below its start.
        let mut bucket = Vec::with_capacity(n_base);
        let mut i = 0usize;
        for b in 0..n_base {
            let start = ln_e0 + step * b as f64;
            while i + 2 < ln_e.len() && ln_e[i + 1] <= start {
                i += 1;
            }
            bucket.push(i as u32);
        }
        Ok(Self {
            name: name.to_string(),
            density_g_cm3,
            components,
            ln_e,
            bucket,
            ln_e0,
            inv_step: 1.0 / step,
            channels,
            ln_cum,
        })
    }

    /// Interval index and log-log weight for energy `kev` (must lie within 1–800 keV).
    #[inline(always)]
    fn locate(&self, kev: f64) -> (usize, f64) {
        let ln_kev = kev.ln();
        let b = (((ln_kev - self.ln_e0) * self.inv_step) as usize).min(self.bucket.len() - 1);
        let mut i = self.bucket[b] as usize;
        let last = self.ln_e.len() - 2;
        while i < last && self.ln_e[i + 1] <= ln_kev {
            i += 1;
        }
        let t = (ln_kev - self.ln_e[i]) / (self.ln_e[i + 1] - self.ln_e[i]);
        (i, t)
    }

    #[inline(always)]
    fn cum_at(&self, i: usize, t: f64, j: usize) -> f64 {
        let a = self.ln_cum[i * self.channels + j];
        let b = self.ln_cum[(i + 1) * self.channels + j];
        (a + t * (b - a)).exp()
    }

    /// Total mass attenuation coefficient μ/ρ (cm²/g) at `kev`, with the run's physics switches.
    #[inline]
    pub fn mu_rho_cm2_g(&self, kev: f64) -> f64 {
        let (i, t) = self.locate(kev);
        self.cum_at(i, t, self.channels - 1)
    }

    /// Chooses the interaction at `kev`: (component index, interaction).
    #[inline]
    pub fn sample_channel(&self, kev: f64, rng: &mut crate::rng::Stream) -> (usize, Interaction) {
        let (i, t) = self.locate(kev);
        let target = rng.uniform() * self.cum_at(i, t, self.channels - 1);
        for j in 0..self.channels - 1 {
            if target < self.cum_at(i, t, j) {
                return (j / 3, KINDS[j % 3]);
            }
        }
        let j = self.channels - 1;
        (j / 3, KINDS[j % 3])
    }

    /// Partial mass cross section (cm²/g) of one channel, interpolated like the table.
    pub fn partial_mu_rho_cm2_g(&self, kev: f64, component: usize, kind: Interaction) -> f64 {
        let (i, t) = self.locate(kev);
        let j = 3 * component + KINDS.iter().position(|&k| k == kind).unwrap();
        let hi = self.cum_at(i, t, j);
        let lo = if j == 0 { 0.0 } else { self.cum_at(i, t, j - 1) };
        (hi - lo).max(0.0)
    }

    /// Energy nodes of the table (keV), for tests and diagnostics.
    pub fn nodes_kev(&self) -> Vec<f64> {
        self.ln_e.iter().map(|l| l.exp()).collect()
    }
}

const KINDS: [Interaction; 3] = [Interaction::Photoelectric, Interaction::Incoherent, Interaction::Coherent];

/// Mass cross section (cm²/g) of one element and interaction under the physics switches.
pub fn element_partial(element: &Element, kind: Interaction, kev: f64, options: &PhysicsOptions) -> f64 {
    match kind {
        Interaction::Photoelectric => element.photo_cm2_g(kev),
        Interaction::Incoherent => {
            if options.bound_compton {
                element.incoherent_cm2_g(kev)
            } else {
                element.z as f64 * AVOGADRO / element.atomic_weight * klein_nishina::sigma_cm2(kev)
            }
        }
        Interaction::Coherent => {
            if options.rayleigh {
                element.coherent_cm2_g(kev)
            } else {
                0.0
            }
        }
    }
}

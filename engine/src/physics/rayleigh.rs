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
        Self { u, cum, ln_u1, inv_step: 1.0 / step }
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
        let i_max = self.interval(u_max);
        let a_max = self.cumulative(u_max);
        loop {
            let target = rng.uniform() * a_max;
            // Binary search over at most ~2000 nodes: this runs once per coherent event only.
            let (mut lo, mut hi) = (0usize, i_max + 1);
            while hi - lo > 1 {
                let mid = (lo + hi) / 2;
                if self.cum[mid] <= target {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
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

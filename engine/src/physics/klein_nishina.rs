//! Klein–Nishina scattering of a photon by a free electron at rest (Klein & Nishina 1929), and
//! Kahn's exact rejection sampler of the scattered energy (H. Kahn, "Applications of Monte Carlo",
//! AECU-3259, 1954; the form given by Everett & Cashwell, LA-5061-MS).

use dosemill_xsdata::{CLASSICAL_ELECTRON_RADIUS_CM, ELECTRON_REST_KEV};

/// Differential cross section per electron dσ/dΩ (cm²/sr) at energy `kev` and scattering cosine.
pub fn dsigma_domega_cm2(kev: f64, cos_theta: f64) -> f64 {
    let k = kev / ELECTRON_REST_KEV;
    let ratio = 1.0 / (1.0 + k * (1.0 - cos_theta)); // E'/E
    let sin2 = 1.0 - cos_theta * cos_theta;
    0.5 * CLASSICAL_ELECTRON_RADIUS_CM.powi(2) * ratio * ratio * (ratio + 1.0 / ratio - sin2)
}

/// Total cross section per electron σ_KN (cm²) at energy `kev` (the closed form).
pub fn sigma_cm2(kev: f64) -> f64 {
    let k = kev / ELECTRON_REST_KEV;
    let re2 = CLASSICAL_ELECTRON_RADIUS_CM.powi(2);
    let l = (2.0 * k).ln_1p();
    let a = 1.0 + 2.0 * k;
    2.0 * std::f64::consts::PI
        * re2
        * ((1.0 + k) / (k * k) * (2.0 * (1.0 + k) / a - l / k) + l / (2.0 * k) - (1.0 + 3.0 * k) / (a * a))
}

/// Mean fraction of the photon energy given to the electron, ⟨T⟩/E, for free electrons:
/// ∫ (1 − E'/E) dσ/dΩ dΩ / σ, by 2000-point Gauss–Legendre-free Simpson integration in cos θ.
pub fn mean_energy_transfer_fraction(kev: f64) -> f64 {
    let n = 2000;
    let h = 2.0 / n as f64;
    let k = kev / ELECTRON_REST_KEV;
    let (mut num, mut den) = (0.0, 0.0);
    for i in 0..=n {
        let c = -1.0 + i as f64 * h;
        let w = if i == 0 || i == n { 1.0 } else if i % 2 == 1 { 4.0 } else { 2.0 };
        let f = dsigma_domega_cm2(kev, c);
        let ratio = 1.0 / (1.0 + k * (1.0 - c));
        num += w * f * (1.0 - ratio);
        den += w * f;
    }
    num / den
}

/// Samples a free-electron Klein–Nishina scattering at energy `kev` exactly (Kahn's method).
/// Returns (E'/E, cos θ).
#[inline]
pub fn sample(kev: f64, rng: &mut crate::rng::Stream) -> (f64, f64) {
    let k = kev / ELECTRON_REST_KEV;
    let a = 1.0 + 2.0 * k;
    let inv_a = 1.0 / a;
    let branch = a / (9.0 + 2.0 * k);
    // With η = E/E' and cos θ = 1 − (η − 1)/k, both branches are written with one division
    // per trial: branch 1 has η = 1 + 2k·r₂, so cos θ = 1 − 2r₂; branch 2 has η = a/d with
    // d = 1 + 2k·r₂, so E'/E = d/a and cos θ = 1 − 2(1 − r₂)/d (the same algebra, rounded
    // differently).
    loop {
        let r1 = rng.uniform();
        let r2 = rng.uniform();
        let r3 = rng.uniform();
        if r1 <= branch {
            let ratio = 1.0 / (1.0 + 2.0 * k * r2); // E'/E = 1/η
            if r3 <= 4.0 * ratio * (1.0 - ratio) {
                return (ratio, 1.0 - 2.0 * r2);
            }
        } else {
            let d = 1.0 + 2.0 * k * r2;
            let ratio = d * inv_a;
            let cos_theta = 1.0 - 2.0 * (1.0 - r2) / d;
            if r3 <= 0.5 * (cos_theta * cos_theta + ratio) {
                return (ratio, cos_theta);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Thomson limit 8π r_e²/3 = 0.66525 barn (REFERENCES: Klein–Nishina, exact).
    #[test]
    fn tends_to_thomson_at_low_energy() {
        let thomson = 8.0 * std::f64::consts::PI / 3.0 * CLASSICAL_ELECTRON_RADIUS_CM.powi(2);
        assert!((thomson * 1e24 - 0.66525).abs() < 5e-5);
        assert!((sigma_cm2(0.5) / thomson - 1.0).abs() < 3e-3);
    }
}

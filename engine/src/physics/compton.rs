//! Incoherent (Compton) scattering on bound electrons.
//!
//! Model: the free-electron Klein–Nishina distribution times the incoherent scattering function
//! S(x,Z)/Z (the impulse-free "waller–hartree" binding correction, Hubbell et al. 1975), sampled
//! by drawing a Klein–Nishina scattering exactly (Kahn) and accepting it with probability
//! S(x,Z)/Z, where x = sin(θ/2)/λ is the momentum transfer. The element is chosen beforehand from
//! the bound incoherent partial cross sections, which are the integrals of the same product.
//!
//! Not modelled: Doppler broadening of the scattered energy (the electron's momentum
//! distribution); E' is the Compton energy of an electron at rest.

use super::klein_nishina;
use dosemill_xsdata::{Element, HC_KEV_ANGSTROM};

/// Momentum transfer x = sin(θ/2)/λ (1/Å) for a photon of `kev` scattered through cos θ.
#[inline]
pub fn momentum_transfer(kev: f64, cos_theta: f64) -> f64 {
    kev / HC_KEV_ANGSTROM * (0.5 * (1.0 - cos_theta)).max(0.0).sqrt()
}

/// Samples an incoherent scattering of a `kev` photon on `element`. With `bound` false the
/// electrons are free (pure Klein–Nishina). Returns (E'/E, cos θ).
#[inline]
pub fn sample(kev: f64, element: &Element, bound: bool, rng: &mut crate::rng::Stream) -> (f64, f64) {
    if !bound {
        return klein_nishina::sample(kev, rng);
    }
    let z = element.z as f64;
    loop {
        let (ratio, cos_theta) = klein_nishina::sample(kev, rng);
        // Accept with probability S(x,Z)/Z: the test `r·Z ≤ S(x)`, decided from the tabulated
        // neighbours of x where they suffice (bit for bit the same decision).
        if element.incoherent_function_at_least(momentum_transfer(kev, cos_theta), rng.uniform() * z) {
            return (ratio, cos_theta);
        }
    }
}

/// The bound differential cross section per atom dσ/dΩ (cm²/sr): Klein–Nishina × S(x,Z).
pub fn dsigma_domega_cm2(kev: f64, cos_theta: f64, element: &Element) -> f64 {
    klein_nishina::dsigma_domega_cm2(kev, cos_theta) * element.incoherent_function(momentum_transfer(kev, cos_theta))
}

//! Photoelectric absorption: the photon is absorbed by an atom of the chosen element and a
//! vacancy is left in the shell chosen from the shell shares of the photo cross section
//! (K, L1, L2, L3; any other shell is "outer" and its vacancy is not followed).
//! The photoelectron's kinetic energy is deposited locally (kerma approximation); the binding
//! energy is released by the vacancy cascade ([`super::fluorescence`]).

use dosemill_xsdata::{Element, Shell};

/// Chooses the shell of the vacancy for absorption of a `kev` photon on `element`.
#[inline]
pub fn sample_shell(kev: f64, element: &Element, rng: &mut crate::rng::Stream) -> Shell {
    sample_shell_ln(kev, kev.ln(), element, rng)
}

/// [`sample_shell`] for a photon whose `ln_kev = kev.ln()` is already known (same draw).
#[inline]
pub fn sample_shell_ln(kev: f64, ln_kev: f64, element: &Element, rng: &mut crate::rng::Stream) -> Shell {
    let shares = element.photo_shell_shares_ln(kev, ln_kev);
    let u = rng.uniform();
    let mut acc = 0.0;
    for (share, shell) in shares.iter().zip([Shell::K, Shell::L1, Shell::L2, Shell::L3]) {
        acc += share;
        if u < acc {
            return shell;
        }
    }
    Shell::Outer
}

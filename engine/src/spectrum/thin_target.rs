//! The thin-target bremsstrahlung spectrum: how an electron of kinetic energy T shares the
//! energy it radiates among photon energies E < T.
//!
//! Written as a shape S(κ) of κ = E/T alone, normalised to ∫₀¹ S(κ) dκ = 1, so that the
//! energy radiated per unit energy lost, E·dN/dE = 2kZ·S(E/T) per keV, always integrates to
//! Kramers' total (the absolute yield stays with Kramers' constant, `model.rs`).
//!
//! * **Kramers** (H. A. Kramers, Phil. Mag. 46 (1923) 836): S = 1, a flat spectrum of radiated
//!   energy up to E = T. Kramers' classical result.
//! * **Born–Elwert** (default): the non-relativistic Born-approximation cross section of Bethe
//!   and Heitler (Proc. R. Soc. A 146 (1934) 83; W. Heitler, *The Quantum Theory of Radiation*,
//!   3rd ed. (1954), §25), k·dσ/dk ∝ ln[(p₀ + p)/(p₀ − p)], p₀ and p the electron momenta
//!   before and after emission, times the Coulomb correction of Elwert (Ann. Phys. 34 (1939)
//!   178), f = (β₀/β)·(1 − e^{−2πZα/β₀})/(1 − e^{−2πZα/β}). We use non-relativistic kinematics,
//!   p/p₀ = β/β₀ = x = √(1 − κ), and Elwert's factor in its heavy-atom limit f = β₀/β (the
//!   exponentials are below 1 % for tungsten up to 200 keV and molybdenum or rhodium up to 60
//!   keV, and below 1.5 % for tungsten at 300 keV). Then
//!   S(κ) = ln[(1 + x)/(1 − x)] / (x · 4 ln 2), since ∫₀¹ ln[(1 + x)/(1 − x)]/x dκ
//!   = 2 ∫₀¹ ln[(1 + x)/(1 − x)] dx = 4 ln 2. S falls from a logarithmic rise at κ → 0
//!   (screening, ignored here, removes it only far below 1 keV) to 2/(4 ln 2) = 0.72 at the
//!   tip, where Kramers' form stays flat. Above about 150 kV the neglected relativistic
//!   kinematics start to matter (a few per cent in shape).

/// The thin-target spectral shape in use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum ThinTarget {
    /// Kramers' flat form.
    Kramers,
    /// Non-relativistic Bethe–Heitler (Born) with Elwert's Coulomb factor.
    #[default]
    BornElwert,
}

impl ThinTarget {
    /// Names accepted on the command line.
    pub const NAMES: [&'static str; 2] = ["born-elwert", "kramers"];

    /// S(κ), κ = E/T; zero for κ ≥ 1 (no photon above the electron's energy).
    #[inline]
    pub fn shape(self, kappa: f64) -> f64 {
        if !(kappa < 1.0) {
            return 0.0;
        }
        match self {
            ThinTarget::Kramers => 1.0,
            ThinTarget::BornElwert => {
                let x = (1.0 - kappa).sqrt();
                // ln[(1+x)/(1−x)] / x = 2 artanh(x)/x → 2 as x → 0.
                let f = if x < 1e-4 { 2.0 + 2.0 * x * x / 3.0 } else { 2.0 * x.atanh() / x };
                f / (4.0 * std::f64::consts::LN_2)
            }
        }
    }

    /// The name used on the command line and in result files.
    pub fn name(self) -> &'static str {
        match self {
            ThinTarget::Kramers => "kramers",
            ThinTarget::BornElwert => "born-elwert",
        }
    }
}

impl std::str::FromStr for ThinTarget {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "kramers" => Ok(ThinTarget::Kramers),
            "born-elwert" => Ok(ThinTarget::BornElwert),
            _ => Err(format!("unknown thin-target form '{s}'; expected one of: {}", ThinTarget::NAMES.join(", "))),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Normalisation: ∫₀¹ S dκ = 1, by brute-force midpoint rule in u with κ = 1 − x², x = 1 − u²
    // (dκ = 4u(1 − u²) du). In x alone the Born–Elwert integrand is artanh(x)/ln 2, with a
    // logarithmic singularity at x = 1 that leaves the midpoint rule 1e-6 short; the second
    // substitution turns it into a u·ln u end point, which the rule handles to ~1e-10.
    #[test]
    fn shapes_are_normalised() {
        for t in [ThinTarget::Kramers, ThinTarget::BornElwert] {
            let n = 200_000;
            let sum: f64 = (0..n)
                .map(|i| {
                    let u = (i as f64 + 0.5) / n as f64;
                    let x = 1.0 - u * u;
                    t.shape(1.0 - x * x) * 4.0 * u * x / n as f64
                })
                .sum();
            assert!((sum - 1.0).abs() < 1e-6, "{t:?}: {sum}");
        }
    }

    // Heitler's Born cross section at κ = 1/2: x = 1/√2, ln[(1+x)/(1−x)]/x = 2.4929 (hand value),
    // and the tip limit 2; nothing at or above κ = 1.
    #[test]
    fn born_elwert_values() {
        let norm = 4.0 * std::f64::consts::LN_2;
        let b = ThinTarget::BornElwert;
        assert!((b.shape(0.5) * norm - 2.4929).abs() < 1e-4, "{}", b.shape(0.5) * norm);
        assert!((b.shape(1.0 - 1e-12) * norm - 2.0).abs() < 1e-9);
        assert_eq!(b.shape(1.0), 0.0);
        assert_eq!(ThinTarget::Kramers.shape(1.2), 0.0);
        assert!(b.shape(0.1) > b.shape(0.5) && b.shape(0.5) > b.shape(0.9));
    }
}

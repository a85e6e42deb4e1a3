//! Photon interaction physics, one interaction per module.
//!
//! - [`xs`]: per-material cross-section tables for tracking and for choosing the interaction.
//! - [`klein_nishina`]: the free-electron Klein–Nishina cross sections and Kahn's exact sampler.
//! - [`compton`]: incoherent scattering on bound electrons (rejection on S(x,Z)/Z).
//! - [`rayleigh`]: coherent scattering (Thomson × F²(x,Z)).
//! - [`photoelectric`]: absorption, choice of element and shell.
//! - [`fluorescence`]: the vacancy cascade (K line, then the L vacancy it leaves).
//!
//! Secondary electrons are not transported: the kinetic energy given to an electron and the
//! binding energy not carried away by fluorescence are deposited where the interaction happens
//! (kerma approximation).

pub mod compton;
pub mod fluorescence;
pub mod klein_nishina;
pub mod majorant;
pub mod photoelectric;
pub mod rayleigh;
pub mod xs;

use dosemill_geometry::Vec3;

/// What happened at an interaction point.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Interaction {
    /// Photoelectric absorption.
    Photoelectric,
    /// Incoherent (Compton) scattering.
    Incoherent,
    /// Coherent (Rayleigh) scattering.
    Coherent,
}

/// Physics switches of a run.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PhysicsOptions {
    /// Photons below this energy (keV) are absorbed locally. At least the data's lowest energy.
    pub cutoff_kev: f64,
    /// Bound-electron correction of incoherent scattering (S(x,Z)); off = free electrons (Klein–Nishina).
    pub bound_compton: bool,
    /// Coherent scattering on (off: its cross section is removed).
    pub rayleigh: bool,
    /// Fluorescence after photoabsorption (off: all energy deposited locally).
    pub fluorescence: bool,
}

impl Default for PhysicsOptions {
    fn default() -> Self {
        Self { cutoff_kev: 1.0, bound_compton: true, rayleigh: true, fluorescence: true }
    }
}

/// The direction obtained by turning unit vector `d` through polar angle θ (given by `cos_theta`)
/// and azimuth φ (given by `cos_phi`, `sin_phi`) about itself. The result is a unit vector.
#[inline]
pub fn rotate(d: Vec3, cos_theta: f64, (cos_phi, sin_phi): (f64, f64)) -> Vec3 {
    let sin_theta = (1.0 - cos_theta * cos_theta).max(0.0).sqrt();
    let t2 = d.x * d.x + d.y * d.y;
    let out = if t2 < 1e-16 {
        let s = if d.z >= 0.0 { 1.0 } else { -1.0 };
        Vec3 { x: sin_theta * cos_phi, y: sin_theta * sin_phi, z: s * cos_theta }
    } else {
        let t = t2.sqrt();
        let st = sin_theta / t;
        Vec3 {
            x: d.x * cos_theta + st * (d.x * d.z * cos_phi - d.y * sin_phi),
            y: d.y * cos_theta + st * (d.y * d.z * cos_phi + d.x * sin_phi),
            z: d.z * cos_theta - sin_theta * t * cos_phi,
        }
    };
    // Renormalise: keeps |d| = 1 to rounding however many scatterings a photon undergoes.
    // For |out|² = 1 + ε with |ε| ≤ 1e-8 (always, for a unit `d`), one Newton step for
    // 1/√(1 + ε), 1 − ε/2, is exact to ε² ≤ 1e-16 of rounding; otherwise the full division.
    let n2 = out.x * out.x + out.y * out.y + out.z * out.z;
    let inv_n = if (n2 - 1.0).abs() <= 1e-8 { 1.5 - 0.5 * n2 } else { 1.0 / n2.sqrt() };
    Vec3 { x: out.x * inv_n, y: out.y * inv_n, z: out.z * inv_n }
}

/// An isotropic unit direction.
#[inline]
pub fn isotropic(rng: &mut crate::rng::Stream) -> Vec3 {
    let cos_theta = 2.0 * rng.uniform() - 1.0;
    let (cos_phi, sin_phi) = rng.azimuth();
    let sin_theta = (1.0 - cos_theta * cos_theta).max(0.0).sqrt();
    Vec3 { x: sin_theta * cos_phi, y: sin_theta * sin_phi, z: cos_theta }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rotation_keeps_unit_length_and_sets_the_angle() {
        let mut rng = crate::rng::history_stream(1, 1);
        let mut d = Vec3 { x: 0.0, y: 0.0, z: 1.0 };
        for _ in 0..100_000 {
            let c = 2.0 * rng.uniform() - 1.0;
            let n = rotate(d, c, rng.azimuth());
            let len = (n.x * n.x + n.y * n.y + n.z * n.z).sqrt();
            assert!((len - 1.0).abs() < 1e-14);
            let dot = n.x * d.x + n.y * d.y + n.z * d.z;
            assert!((dot - c).abs() < 1e-9, "dot {dot} vs cos {c}");
            d = n;
        }
    }
}

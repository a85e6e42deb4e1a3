//! Kerma on the central axis: the photon fluence crossing small discs centred on the z axis of
//! planes normal to z, turned into collision kerma of chosen media.
//!
//! Each crossing of a disc of area A by a photon of energy E, weight w and direction cosine
//! cos θ to z adds w·E·(μen/ρ)(E)/(A·|cos θ|) to the bin of that plane, medium and direction (the
//! surface-crossing fluence estimator, |cos θ| floored at [`super::MIN_COS`] as in the air-kerma
//! scorer). Units: keV/g per history, so per-history values sit far above the tally's fixed-point
//! resolution (1 keV/g = 1.602 176 634e-13 Gy).
//!
//! In the kerma approximation the collision kerma of a medium at a point inside a phantom of that
//! medium is its absorbed dose, so planes inside a slab give the central-axis depth dose, and a
//! plane just in front of the entrance surface gives air kerma, entrance surface air kerma and
//! entrance surface dose (water, tissue) from the same photons.

use std::sync::Arc;

use super::{PhotonView, Tally, MIN_COS};
use dosemill_xsdata::material::Material;

/// Gy per keV/g.
pub const GY_PER_KEV_PER_G: f64 = super::JOULE_PER_KEV * 1e3;

/// Bins per plane and medium: all crossings, towards +z, towards −z.
pub const DIRECTIONS: usize = 3;

/// Collision kerma of several media at on-axis discs of several planes normal to z.
#[derive(Debug, Clone, PartialEq)]
pub struct PlaneKerma {
    /// Centre of every disc in x and y (cm).
    pub center_xy_cm: [f64; 2],
    /// Radius of every disc (cm).
    pub radius_cm: f64,
    /// Positions of the planes along z (cm).
    pub planes_z_cm: Vec<f64>,
    /// Media whose μen/ρ converts fluence to kerma (each must have an absorption table).
    pub media: Vec<Arc<Material>>,
    /// Bins: `(plane · media.len() + medium) · DIRECTIONS + direction` (keV/g per history).
    pub tally: Tally,
}

impl PlaneKerma {
    /// A scorer with discs of `radius_cm` centred on (x, y) = `center_xy_cm` at `planes_z_cm`,
    /// scoring the collision kerma of each of `media`. Fails if a medium has no μen/ρ table.
    pub fn new(center_xy_cm: [f64; 2], radius_cm: f64, planes_z_cm: Vec<f64>, media: Vec<Arc<Material>>) -> Result<Self, dosemill_xsdata::MaterialError> {
        for m in &media {
            m.absorption_table()?;
        }
        let bins = planes_z_cm.len() * media.len() * DIRECTIONS;
        Ok(PlaneKerma { center_xy_cm, radius_cm, planes_z_cm, media, tally: Tally::new(bins) })
    }

    /// Bin of (plane, medium, direction).
    #[inline]
    pub fn bin(&self, plane: usize, medium: usize, direction: usize) -> usize {
        (plane * self.media.len() + medium) * DIRECTIONS + direction
    }

    /// A straight flight of `photon` over `length_cm`.
    #[inline]
    pub fn segment(&mut self, photon: &PhotonView, length_cm: f64, history: u64) {
        let d = photon.dir.z;
        if d == 0.0 {
            return;
        }
        let za = photon.pos.z;
        let zb = za + d * length_cm;
        let (lo, hi) = (za.min(zb), za.max(zb));
        let area = std::f64::consts::PI * self.radius_cm * self.radius_cm;
        let r2max = self.radius_cm * self.radius_cm;
        let nm = self.media.len();
        for p in 0..self.planes_z_cm.len() {
            let plane = self.planes_z_cm[p];
            // Half-open test as in the air-kerma scorer: a crossing ending on the plane counts once.
            if !(lo < plane && plane <= hi) {
                continue;
            }
            let t = (plane - za) / d;
            let x = photon.pos.x + photon.dir.x * t - self.center_xy_cm[0];
            let y = photon.pos.y + photon.dir.y * t - self.center_xy_cm[1];
            if x * x + y * y > r2max {
                continue;
            }
            let energy_fluence = photon.weight * photon.kev / (area * d.abs().max(MIN_COS));
            let dir_bin = if d > 0.0 { 1 } else { 2 };
            for m in 0..nm {
                let muen = self.media[m].absorption_table().map(|t| t.muen_rho_cm2_g(photon.kev)).unwrap_or(0.0);
                let k = energy_fluence * muen;
                let b = (p * nm + m) * DIRECTIONS;
                self.tally.add(b, k, history);
                self.tally.add(b + dir_bin, k, history);
            }
        }
    }
}

//! Ray tracing through a problem's geometry: the optical depth ∫μ ds along a straight line, for
//! deterministic primary images and next-event (forced-detection) estimates.

use crate::physics::xs::MaterialXs;
use crate::transport::Geometry;
use dosemill_geometry::{Region, Vec3};

/// Optical depth ∫μ ds (dimensionless) for a photon of `kev` from `from` along unit `dir` over
/// `length_cm` (or until it leaves the world, whichever comes first).
pub fn optical_depth(geometry: &Geometry, materials: &[MaterialXs], from: Vec3, dir: Vec3, length_cm: f64, kev: f64) -> f64 {
    match geometry {
        Geometry::Slabs(slabs) => {
            let mut p = from;
            let mut r = slabs.locate(p);
            let mut left = length_cm;
            let mut tau = 0.0;
            let ln_kev = kev.ln();
            // Each layer is crossed once per straight ray, plus the world: bounded by the layer count.
            let mut guard = 4 * (slabs.num_layers() + 4);
            while left > 0.0 && !r.is_escaped() && guard > 0 {
                guard -= 1;
                let b = slabs.step(p, dir, r);
                let s = b.distance_cm.min(left);
                if let Some((m, rho)) = slabs.material_of(r) {
                    let t = &materials[m as usize];
                    tau += t.mu_rho_at(t.lookup_ln(ln_kev)) * rho * s;
                }
                left -= s;
                if b.distance_cm >= left + s {
                    break;
                }
                p = b.landing(p, dir);
                r = b.next;
            }
            tau
        }
        Geometry::Voxels(world) => {
            let grid = &*world.grid;
            let ln_kev = kev.ln();
            let mut tau = 0.0;
            // World medium outside the grid.
            if let Some(medium) = grid.world().medium {
                let t = &materials[medium.material as usize];
                let mu = t.mu_rho_at(t.lookup_ln(ln_kev)) * medium.density_g_cm3;
                let total = match grid.world().bounds.chord(from, dir) {
                    Some(c) => (c.exit_cm.min(length_cm) - c.enter_cm.max(0.0)).max(0.0),
                    None => 0.0,
                };
                let inside = match grid.bounds().chord(from, dir) {
                    Some(c) => (c.exit_cm.min(length_cm) - c.enter_cm.max(0.0)).max(0.0),
                    None => 0.0,
                };
                tau += mu * (total - inside).max(0.0);
            }
            for seg in grid.walk(from, dir, length_cm) {
                let (m, rho) = grid.voxel_medium(seg.index);
                let t = &materials[m as usize];
                tau += t.mu_rho_at(t.lookup_ln(ln_kev)) * rho * seg.length_cm;
            }
            tau
        }
    }
}

/// The region at a point (for callers that need the medium at an interaction site).
pub fn locate(geometry: &Geometry, p: Vec3) -> Region {
    geometry.locate(p)
}

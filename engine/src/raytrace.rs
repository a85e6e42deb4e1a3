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

/// μ/ρ (cm²/g) of every material at one energy: tabulated for the first [`MuAt::TABLED`]
/// materials, looked up beyond.
pub struct MuAt<'a> {
    materials: &'a [MaterialXs],
    ln_kev: f64,
    first: [f64; MuAt::TABLED],
}

impl<'a> MuAt<'a> {
    /// Materials tabulated up front.
    pub const TABLED: usize = 16;

    /// μ/ρ of `materials` at `kev`.
    #[inline]
    pub fn new(materials: &'a [MaterialXs], kev: f64) -> Self {
        Self::new_ln(materials, kev.ln())
    }

    /// μ/ρ of `materials` at the energy whose logarithm is `ln_kev`.
    #[inline]
    pub fn new_ln(materials: &'a [MaterialXs], ln_kev: f64) -> Self {
        let mut first = [0.0; Self::TABLED];
        for (v, t) in first.iter_mut().zip(materials) {
            *v = t.mu_rho_at(t.lookup_ln(ln_kev));
        }
        MuAt { materials, ln_kev, first }
    }

    /// μ/ρ of the first [`MuAt::TABLED`] materials (0 past the last material).
    #[inline]
    pub fn tabled(&self) -> &[f64; MuAt::TABLED] {
        &self.first
    }

    /// μ/ρ of material `m` (cm²/g).
    #[inline]
    pub fn mu_rho(&self, m: u16) -> f64 {
        match self.first.get(m as usize) {
            Some(&v) => v,
            None => {
                let t = &self.materials[m as usize];
                t.mu_rho_at(t.lookup_ln(self.ln_kev))
            }
        }
    }
}

/// Calls `f(material, density, start_cm, length_cm)` for every piece of the ray from `from`
/// along unit `dir` that lies in a medium, in order along the ray, until the ray leaves the
/// world or `f` returns false.
#[inline]
pub fn for_each_piece(geometry: &Geometry, from: Vec3, dir: Vec3, mut f: impl FnMut(u16, f64, f64, f64) -> bool) {
    match geometry {
        Geometry::Slabs(slabs) => {
            let mut p = from;
            let mut r = slabs.locate(p);
            let mut at = 0.0;
            if r.is_escaped() {
                // Start outside the world box: enter it along the ray.
                match slabs.world().bounds.chord(p, dir) {
                    Some(c) if c.enter_cm >= 0.0 && c.exit_cm > c.enter_cm => {
                        at = c.enter_cm + 1e-9;
                        p = p + dir * at;
                        r = slabs.locate(p);
                    }
                    _ => return,
                }
            }
            // Each layer is crossed once per straight ray, plus the world: bounded by the layer count.
            let mut guard = 4 * (slabs.num_layers() + 4);
            let mut been_in_stack = false;
            while !r.is_escaped() && guard > 0 {
                guard -= 1;
                // The stack is convex: a ray that has left it into a vacuum world meets nothing more.
                if r.is_world() {
                    if been_in_stack && slabs.material_of(r).is_none() {
                        return;
                    }
                } else {
                    been_in_stack = true;
                }
                let b = slabs.step(p, dir, r);
                if !b.distance_cm.is_finite() {
                    return;
                }
                if let Some((m, rho)) = slabs.material_of(r) {
                    if rho > 0.0 && b.distance_cm > 0.0 && !f(m, rho, at, b.distance_cm) {
                        return;
                    }
                }
                at += b.distance_cm;
                p = b.landing(p, dir);
                r = b.next;
            }
        }
        Geometry::Voxels(world) => {
            let grid = &*world.grid;
            let Some(wc) = grid.world().bounds.chord(from, dir) else { return };
            let (w0, w1) = (wc.enter_cm.max(0.0), wc.exit_cm);
            if w1 <= w0 {
                return;
            }
            let (g0, g1) = match grid.bounds().chord(from, dir) {
                Some(c) if c.exit_cm > c.enter_cm.max(0.0) => (c.enter_cm.max(0.0), c.exit_cm),
                _ => (w1, w1),
            };
            let medium = grid.world().medium.filter(|m| m.density_g_cm3 > 0.0);
            if let Some(m) = medium {
                if g0 > w0 && !f(m.material, m.density_g_cm3, w0, g0 - w0) {
                    return;
                }
            }
            if g1 > g0 {
                for seg in grid.walk(from, dir, f64::INFINITY) {
                    if seg.length_cm > 0.0 {
                        let (m, rho) = grid.voxel_medium(seg.index);
                        if rho > 0.0 && !f(m, rho, seg.start_cm, seg.length_cm) {
                            return;
                        }
                    }
                }
            }
            if let Some(m) = medium {
                if w1 > g1 {
                    f(m.material, m.density_g_cm3, g1, w1 - g1);
                }
            }
        }
    }
}

/// Optical depth of the whole ray from `from` along `dir` to the edge of the world, with μ/ρ
/// from `mu`.
#[inline]
pub fn depth_to_exit(geometry: &Geometry, mu: &MuAt, from: Vec3, dir: Vec3) -> f64 {
    let mut tau = 0.0;
    for_each_piece(geometry, from, dir, |m, rho, _, len| {
        tau += mu.mu_rho(m) * rho * len;
        true
    });
    tau
}

/// The media pieces of one ray, kept when there are few (slab problems), so that a point at a
/// given optical depth is found without walking the ray again.
pub struct RayPieces {
    /// (material, μ in 1/cm, start, length) per piece, in order along the ray.
    pieces: [(u16, f64, f64, f64); RayPieces::MAX],
    count: usize,
    /// More pieces than kept: walk the ray again.
    overflow: bool,
    /// Optical depth of the whole ray.
    pub total: f64,
}

impl RayPieces {
    /// Pieces kept.
    pub const MAX: usize = 16;

    /// The pieces and the whole optical depth of the ray from `from` along `dir` (μ/ρ from `mu`).
    #[inline]
    pub fn trace(geometry: &Geometry, mu: &MuAt, from: Vec3, dir: Vec3) -> Self {
        let mut r = RayPieces { pieces: [(0, 0.0, 0.0, 0.0); Self::MAX], count: 0, overflow: false, total: 0.0 };
        for_each_piece(geometry, from, dir, |m, rho, start, len| {
            let mu_l = mu.mu_rho(m) * rho;
            r.total += mu_l * len;
            if r.count < Self::MAX {
                r.pieces[r.count] = (m, mu_l, start, len);
                r.count += 1;
            } else {
                r.overflow = true;
            }
            true
        });
        r
    }

    /// [`point_at_depth`] of the same ray, from the kept pieces when they are all there.
    #[inline]
    pub fn point_at_depth(&self, geometry: &Geometry, mu: &MuAt, from: Vec3, dir: Vec3, tau: f64) -> Option<(Vec3, u16)> {
        if self.overflow {
            return point_at_depth(geometry, mu, from, dir, tau);
        }
        let mut left = tau;
        for &(m, mu_l, start, len) in &self.pieces[..self.count] {
            let d = mu_l * len;
            if d >= left && mu_l > 0.0 {
                return Some((from + dir * (start + (left / mu_l).min(len)), m));
            }
            left -= d;
        }
        None
    }
}

/// The point of the ray from `from` along `dir` where the optical depth (μ/ρ from `mu`)
/// reaches `tau`, and the material there; `None` when the ray leaves the world first.
#[inline]
pub fn point_at_depth(geometry: &Geometry, mu: &MuAt, from: Vec3, dir: Vec3, tau: f64) -> Option<(Vec3, u16)> {
    let mut left = tau;
    let mut found = None;
    for_each_piece(geometry, from, dir, |m, rho, start, len| {
        let mu_l = mu.mu_rho(m) * rho;
        let d = mu_l * len;
        if d >= left && mu_l > 0.0 {
            found = Some((from + dir * (start + (left / mu_l).min(len)), m));
            return false;
        }
        left -= d;
        true
    });
    found
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::history_stream;

    fn problem(deck: &str) -> crate::transport::Problem {
        let d = crate::deck::load_str(deck, std::path::Path::new("runs/raytrace_test.toml")).unwrap_or_else(|e| panic!("{e:?}"));
        crate::setup::build(&d.resolved).unwrap_or_else(|e| panic!("{e}")).0
    }

    const SLABS: &str = r#"
[run]
histories = 1
[source]
kind = "pencil"
position_cm = [0, 0, -50]
energy_kev = 60
[geometry]
kind = "slabs"
world = "air"
start_z_cm = -20
[[geometry.layer]]
material = "water"
thickness_cm = 8
[[geometry.layer]]
material = "cortical_bone"
thickness_cm = 1.5
[[geometry.layer]]
material = "lung"
thickness_cm = 6
[[score]]
name = "counts"
kind = "interaction_counts"
"#;

    const VOXELS: &str = r#"
[run]
histories = 1
[source]
kind = "pencil"
position_cm = [0, 0, -50]
energy_kev = 60
[geometry]
kind = "voxels"
world = "air"
voxels = [12, 10, 9]
voxel_size_cm = [1, 1, 1.5]
[geometry.phantom]
fill = "water"
[[geometry.phantom.shape]]
kind = "sphere"
center_cm = [1, 0, 6]
radius_cm = 3
material = "cortical_bone"
region = "bone"
[[score]]
name = "counts"
kind = "interaction_counts"
"#;

    /// The ray pieces against the independent per-segment optical depth of [`optical_depth`]:
    /// the whole-ray depth agrees, and the point found for a depth τ lies where the optical
    /// depth from the start is τ, in the material there. Random rays from points inside and
    /// outside the object (fixed seed), three energies.
    #[test]
    fn depth_to_exit_and_point_at_depth_agree_with_optical_depth() {
        for deck in [SLABS, VOXELS] {
            let p = problem(deck);
            let mut rng = history_stream(17, 3);
            let mut found = 0;
            for i in 0..600 {
                let kev = [20.0, 45.0, 90.0][i % 3];
                let from = Vec3::new(rng.uniform() * 16.0 - 8.0, rng.uniform() * 16.0 - 8.0, rng.uniform() * 40.0 - 25.0);
                let dir = crate::physics::isotropic(&mut rng);
                let mu = MuAt::new(&p.materials, kev);
                let total = depth_to_exit(&p.geometry, &mu, from, dir);
                let reference = optical_depth(&p.geometry, &p.materials, from, dir, 1e4, kev);
                assert!((total - reference).abs() <= 1e-9 * reference.max(1.0), "ray {i}: {total} vs {reference}");
                if total <= 0.0 {
                    continue;
                }
                let tau = rng.uniform() * total;
                let (x, m) = point_at_depth(&p.geometry, &mu, from, dir, tau).expect("a depth below the total is reached");
                let pieces = RayPieces::trace(&p.geometry, &mu, from, dir);
                assert_eq!(pieces.total.to_bits(), total.to_bits(), "ray {i}: pieces' total");
                assert_eq!(pieces.point_at_depth(&p.geometry, &mu, from, dir, tau), Some((x, m)), "ray {i}: point from the kept pieces");
                let s = (x - from).norm_squared().sqrt();
                let back = optical_depth(&p.geometry, &p.materials, from, dir, s, kev);
                assert!((back - tau).abs() <= 1e-7 * total.max(1.0), "ray {i}: τ {tau} found at {s} cm where τ = {back}");
                let here = match &p.geometry {
                    Geometry::Slabs(g) => g.material_of(g.locate(x)),
                    Geometry::Voxels(w) => w.grid.material_of(w.grid.locate(x)),
                };
                let (m_here, _) = here.expect("the point is in a medium");
                assert_eq!(m, m_here, "ray {i}: material at the point");
                found += 1;
            }
            assert!(found > 300, "most rays cross a medium ({found})");
            assert!(point_at_depth(&p.geometry, &MuAt::new(&p.materials, 45.0), Vec3::new(0.0, 0.0, -5.0), Vec3::new(0.0, 0.0, 1.0), 1e6).is_none(), "a depth beyond the ray is not reached");
        }
    }
}

//! Steered Compton scattering, forced detection's companion for multiply scattered photons
//! (`forced_detection_steer`, DETECTOR.md *Steered Compton directions*).
//!
//! At a Compton scattering the new direction is drawn from the mixture
//! q(Ω) = (1 − s) p(Ω) + s g(Ω): with probability 1 − s from the transport's own angular
//! density p (Klein–Nishina × S(x, Z) per atom, normalised by the scorer's quadrature of the
//! same dσ/dΩ), with probability s uniformly in solid angle over the detector face as seen
//! from the scattering point (g = 1/Ω_face inside it, 0 outside; Ureña, Fajardo & King's
//! area-preserving spherical-rectangle sampling, `sphrect.rs`). The energy follows from the
//! angle (Compton formula), and everything the scattering leads to — the local deposit
//! (E − E') and the scattered photon — carries the factor p(Ω)/q(Ω) ≤ 1/(1 − s): the one-sample
//! mixture (balance-heuristic) estimator of Veach & Guibas (SIGGRAPH 1995), unbiased because q
//! covers every direction where p > 0. Histories then conserve energy only on average.

use super::sphrect::SphericalRect;
use super::DetectorSetup;
use crate::physics::{compton, klein_nishina, rotate};
use crate::rng::Stream;
use dosemill_geometry::Vec3;
use dosemill_xsdata::{Element, ELECTRON_REST_KEV};

impl DetectorSetup {
    /// True when this detector steers Compton directions toward its face.
    #[inline]
    pub fn steers(&self) -> bool {
        self.spec.forced_detection && self.spec.fd_steer > 0.0
    }

    /// A Compton scattering at `pos` of a photon of energy `kev` (ln `ln_kev`) moving along
    /// `dir`, off component `component` (element `element`) of problem material `material`:
    /// the new direction, the energy ratio E'/E and the weight factor p(Ω)/q(Ω) (module docs).
    #[inline]
    #[allow(clippy::too_many_arguments)]
    pub fn steer_incoherent(&self, pos: Vec3, dir: Vec3, kev: f64, ln_kev: f64, material: usize, component: usize, element: &Element, bound: bool, rng: &mut Stream) -> (Vec3, f64, f64) {
        let s = self.spec.fd_steer;
        let h = (self.plane_cm - pos.axis(self.n_axis)) * self.facing;
        let su = pos.axis(self.u_axis) - self.center_u;
        let sv = pos.axis(self.v_axis) - self.center_v;
        let (hu, hv) = (0.5 * self.spec.size_cm[0], 0.5 * self.spec.size_cm[1]);
        // Steering only where the face is in view with a solid angle above 10⁻⁹ sr, by the lower
        // bound Ω ≥ A h / r_max³ (A the face's area, r_max the distance to its farthest corner),
        // so that the solid angle from the edge-plane angles is exact to ~10⁻⁷; elsewhere the
        // transport's own sampler, weight unchanged.
        let r_max2 = h * h + (su.abs() + hu).powi(2) + (sv.abs() + hv).powi(2);
        if h <= 0.0 || 4.0 * hu * hv * h <= 1e-9 * r_max2 * r_max2.sqrt() {
            let (ratio, cos) = compton::sample(kev, element, bound, rng);
            return (rotate(dir, cos, rng.azimuth()), ratio, 1.0);
        }
        let face = || SphericalRect::new(-hu - su, hu - su, -hv - sv, hv - sv, h);
        // Where a direction meets the face's plane, and whether inside the face.
        let on_face = |out: Vec3| {
            let dn = out.axis(self.n_axis) * self.facing;
            dn > 0.0 && {
                let t = h / dn;
                (su + out.axis(self.u_axis) * t).abs() <= hu && (sv + out.axis(self.v_axis) * t).abs() <= hv
            }
        };
        // p(Ω): the sampler's density per steradian, dσ/dΩ / σ (σ by the set-up quadrature).
        let density = |cos: f64| {
            let per_atom = if bound { element.incoherent_function(compton::momentum_transfer(kev, cos)) } else { element.z as f64 };
            let norm = &self.norms[self.material_elements[material][component]];
            klein_nishina::dsigma_domega_cm2(kev, cos) * per_atom * norm.inv_inc.at_ln(ln_kev)
        };
        let mix = |p: f64, solid_angle: f64| {
            let q = (1.0 - s) * p + s / solid_angle.max(f64::MIN_POSITIVE);
            if q > 0.0 { p / q } else { 0.0 }
        };
        if rng.uniform() < s {
            let rect = face();
            let (x, y) = rect.sample(rng.uniform(), rng.uniform());
            let inv_r = 1.0 / (x * x + y * y + h * h).sqrt();
            let out = Vec3::new(0.0, 0.0, 0.0).with_axis(self.u_axis, x * inv_r).with_axis(self.v_axis, y * inv_r).with_axis(self.n_axis, self.facing * h * inv_r);
            let cos = dir.dot(out).clamp(-1.0, 1.0);
            let ratio = 1.0 / (1.0 + kev / ELECTRON_REST_KEV * (1.0 - cos));
            return (out, ratio, mix(density(cos), rect.solid_angle));
        }
        let (ratio, cos) = compton::sample(kev, element, bound, rng);
        let out = rotate(dir, cos, rng.azimuth());
        // Off the face g = 0 and p/q = 1/(1 − s) whatever p is.
        let factor = if on_face(out) {
            mix(density(cos), face().solid_angle)
        } else {
            1.0 / (1.0 - s)
        };
        (out, ratio, factor)
    }
}

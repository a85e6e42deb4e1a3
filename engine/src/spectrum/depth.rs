//! Where in the anode photons are made, and how much of the anode they cross on the way out.
//!
//! Electron path s (g/cm²) and energy are tied by the Thomson–Whiddington law,
//! s(T) = (T0² − T²)/C. The depth of the electron at path s follows Archard's diffusion model
//! (D. B. Archard, J. Appl. Phys. 32 (1961) 1505): the electron runs straight in along the beam
//! (at the anode angle θ to the target normal) to the depth of complete diffusion,
//! x_d = 40 R / (7 Z) of path (R = T0²/C the range), and from that diffusion centre moves on in a
//! straight line in a random (isotropic) direction, so at path s > x_d it lies at depth
//! z = x_d cos θ + (s − x_d) μ, μ uniform in [−1, 1]. An electron whose line reaches the surface
//! has been backscattered and emits nothing further (Archard's model predicts a backscatter
//! coefficient near 0.5 for tungsten, as measured). A photon made at depth z leaves along the
//! central ray, at θ to the face, through z / sin θ of anode.
//!
//! With self-absorption switched off the model does not use this module: every electron then
//! slows fully inside the target (Kramers' ideal thick target).

use super::quadrature::GaussLegendre;

/// Panels of the energy integral: geometric in path, finer near the surface.
const PANELS_MAX: usize = 40;

/// Emission-depth geometry of one electron energy T0 in one anode.
#[derive(Debug, Clone, Copy)]
pub(crate) struct EmissionDepth {
    /// Incident electron energy (keV).
    pub t0_kev: f64,
    /// Thomson–Whiddington constant (keV² cm²/g).
    pub c_tw: f64,
    /// Path length to the depth of complete diffusion (g/cm²).
    pub diffusion_path_g_cm2: f64,
    /// cos θ, θ the anode angle (electron incidence from the normal).
    pub cos_theta: f64,
    /// 1 / sin θ: anode crossed per unit depth on the way out along the central ray.
    pub exit_per_depth: f64,
}

impl EmissionDepth {
    /// Geometry for anode atomic number `z`, energy `t0_kev`, Thomson–Whiddington constant
    /// `c_tw` and anode angle `theta_rad`.
    pub fn new(z: f64, t0_kev: f64, c_tw: f64, theta_rad: f64) -> Self {
        let range = t0_kev * t0_kev / c_tw;
        EmissionDepth {
            t0_kev,
            c_tw,
            diffusion_path_g_cm2: (40.0 / (7.0 * z)).min(1.0) * range,
            cos_theta: theta_rad.cos(),
            exit_per_depth: 1.0 / theta_rad.sin(),
        }
    }

    /// Path (g/cm²) at electron energy `t_kev`.
    fn path(&self, t_kev: f64) -> f64 {
        ((self.t0_kev * self.t0_kev - t_kev * t_kev) / self.c_tw).max(0.0)
    }

    /// Electron energy (keV) after path `s`.
    fn energy(&self, s: f64) -> f64 {
        (self.t0_kev * self.t0_kev - self.c_tw * s).max(0.0).sqrt()
    }

    /// Mean over diffusion directions, for an electron after path `s`, of
    /// [still inside the anode] × [transmission out of the anode of a photon with anode
    /// attenuation `mu_rho` (cm²/g) made there].
    pub fn escape(&self, mu_rho: f64, s: f64) -> f64 {
        let k = mu_rho * self.exit_per_depth;
        let xd = self.diffusion_path_g_cm2;
        if s <= xd {
            return (-k * s * self.cos_theta).exp();
        }
        let a = xd * self.cos_theta;
        let l = s - xd;
        // z uniform on [a − l, a + l]; mean of exp(−k z) over the part still inside (z > 0).
        if k * l < 1e-12 {
            return if l > a { (a + l) / (2.0 * l) } else { 1.0 };
        }
        if l <= a {
            // (e^{−k(a−l)} − e^{−k(a+l)}) / (2kl)
            (-k * (a - l)).exp() * (-(-2.0 * k * l).exp_m1()) / (2.0 * k * l)
        } else {
            // (1 − e^{−k(a+l)}) / (2kl)
            -(-k * (l + a)).exp_m1() / (2.0 * k * l)
        }
    }

    /// ∫_{t_lo}^{T0} g(T) · escape(μ/ρ, s(T)) dT.
    ///
    /// Composite Gauss–Legendre in T on panels whose ends lie at paths growing geometrically
    /// from the surface (where the escape probability changes fastest) and at the kinks of the
    /// depth model (end of the straight part, first possible surface crossing).
    pub fn integral(&self, gl: &GaussLegendre, t_lo: f64, mu_rho: f64, g: impl Fn(f64) -> f64) -> f64 {
        if t_lo >= self.t0_kev {
            return 0.0;
        }
        let s_max = self.path(t_lo);
        let k = mu_rho * self.exit_per_depth;
        let mut cuts: Vec<f64> = Vec::with_capacity(PANELS_MAX + 4);
        let xd = self.diffusion_path_g_cm2;
        let first = (0.05 / k.max(1e-300)).min(s_max / 1024.0).min(xd / 4.0).max(s_max * 1e-9);
        let mut s = first;
        cuts.push(0.0);
        while s < s_max && cuts.len() < PANELS_MAX {
            cuts.push(s);
            s *= 2.0;
        }
        for extra in [xd, xd * (1.0 + self.cos_theta)] {
            if extra > 0.0 && extra < s_max {
                cuts.push(extra);
            }
        }
        cuts.push(s_max);
        cuts.sort_by(f64::total_cmp);
        cuts.dedup();
        let mut sum = 0.0;
        for w in cuts.windows(2) {
            let (t_hi, t_lo_p) = (self.energy(w[0]), self.energy(w[1]).max(t_lo));
            if t_hi > t_lo_p {
                sum += gl.integrate(t_lo_p, t_hi, |t| g(t) * self.escape(mu_rho, self.path(t)));
            }
        }
        sum
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn geometry() -> EmissionDepth {
        // Tungsten-like: T0 = 100 keV, R ≈ 0.025 g/cm², θ = 12°.
        EmissionDepth::new(74.0, 100.0, 100.0 * 100.0 / 0.025, 12f64.to_radians())
    }

    // Reference: brute-force composite Simpson in T with 400 000 panels.
    #[test]
    fn integral_matches_brute_force() {
        let d = geometry();
        let gl = GaussLegendre::new(8);
        for &(lo, mu) in &[(1.0, 0.0), (5.0, 3000.0), (20.0, 65.0), (40.0, 10.0), (69.0, 3.5), (69.6, 9.0), (2.0, 500.0)] {
            let g = |t: f64| 1.0 + 0.01 * t;
            let got = d.integral(&gl, lo, mu, g);
            let n = 400_000;
            let h = (d.t0_kev - lo) / n as f64;
            let f = |t: f64| g(t) * d.escape(mu, d.path(t));
            let mut s = f(lo) + f(d.t0_kev);
            for i in 1..n {
                s += if i % 2 == 1 { 4.0 } else { 2.0 } * f(lo + i as f64 * h);
            }
            let want = s * h / 3.0;
            assert!((got / want - 1.0).abs() < 1e-5, "lo={lo} mu={mu}: {got} vs {want}");
        }
    }

    // The mean of exp(−k z)·[z > 0] over z uniform in [a−l, a+l], checked by direct quadrature.
    #[test]
    fn escape_matches_direct_average() {
        let d = geometry();
        let xd = d.diffusion_path_g_cm2;
        for &(mu, s) in &[(50.0, xd * 0.5), (50.0, xd * 1.5), (50.0, xd * 3.0), (1.0, xd * 10.0), (2000.0, xd * 2.5), (0.0, xd * 4.0)] {
            let got = d.escape(mu, s);
            let want = if s <= xd {
                (-mu * d.exit_per_depth * s * d.cos_theta).exp()
            } else {
                let a = xd * d.cos_theta;
                let l = s - xd;
                let n = 200_000;
                let z_lo = (a - l).max(0.0);
                let width = a + l - z_lo;
                (0..n)
                    .map(|i| {
                        let z = z_lo + width * (i as f64 + 0.5) / n as f64;
                        (-mu * d.exit_per_depth * z).exp()
                    })
                    .sum::<f64>()
                    / n as f64
                    * width
                    / (2.0 * l)
            };
            assert!((got / want - 1.0).abs() < 1e-6, "mu={mu} s={s}: {got} vs {want}");
        }
    }
}

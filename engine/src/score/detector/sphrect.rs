//! Directions uniform in solid angle over a rectangle, as seen from a point: the area-preserving
//! parametrisation of a spherical rectangle of Ureña, Fajardo & King, "An Area-Preserving
//! Parametrization for Spherical Rectangles", Computer Graphics Forum 32(4), 2013.
//!
//! # Frame
//!
//! The viewpoint is the origin; the rectangle is [x0, x1] × [y0, y1] in the plane z = −h (h > 0),
//! edges along x and y. Its projection on the unit sphere is a spherical quadrilateral bounded by
//! four great circles, the planes through the origin and each edge, with inward normals
//!
//! ```text
//! n0 ∝ (0, z0, −y0)   (edge y = y0),   n1 ∝ (−z0, 0, x1)  (edge x = x1),
//! n2 ∝ (0, −z0, y1)   (edge y = y1),   n3 ∝ (z0, 0, −x0)  (edge x = x0),   z0 = −h.
//! ```
//!
//! The interior angles are γ_i = acos(−n_i·n_{i+1}) and the solid angle (Girard) is
//! Ω = γ0 + γ1 + γ2 + γ3 − 2π.
//!
//! # Sampling
//!
//! A uniform (ξ1, ξ2) ∈ [0, 1)² maps to a point of the rectangle whose direction is uniform in
//! solid angle, i.e. of density 1/Ω over the spherical rectangle. First the abscissa x_u: the
//! sub-rectangle [x0, x_u] × [y0, y1] has solid angle ξ1·Ω; with k = 2π − γ2 − γ3 and
//! α = ξ1·Ω + k (the angle of the spherical triangle-pair construction of the paper, §3),
//!
//! ```text
//! f = (cos α · b0 − b1) / sin α,   c = sign(f) / √(f² + b0²),   x_u = −c·z0 / √(1 − c²),
//! b0 = n0.z,  b1 = n2.z.
//! ```
//!
//! Then the ordinate: along the segment x = x_u the solid angle is linear in
//! h_y = y / √(x_u² + z0² + y²) (the sine of the elevation), so with d = √(x_u² + z0²),
//! h_v = h0 + ξ2 (h1 − h0), h_{0,1} = y_{0,1}/√(d² + y_{0,1}²), and y_v = h_v d / √(1 − h_v²).
//! The density 1/Ω in solid angle is checked by a χ² test below, and Ω against the closed-form
//! corner formula [`solid_angle`].

use std::f64::consts::TAU;

/// A rectangle prepared for sampling from one viewpoint (see the module docs).
#[derive(Debug, Clone, Copy)]
pub struct SphericalRect {
    x0: f64,
    x1: f64,
    y0: f64,
    y1: f64,
    z0: f64,
    b0: f64,
    b1: f64,
    k: f64,
    /// Solid angle of the rectangle from the viewpoint (sr).
    pub solid_angle: f64,
}

impl SphericalRect {
    /// The rectangle [x0, x1] × [y0, y1] (x0 < x1, y0 < y1) in the plane at distance `h` > 0 from
    /// the viewpoint, in the viewpoint's frame.
    #[inline]
    pub fn new(x0: f64, x1: f64, y0: f64, y1: f64, h: f64) -> Self {
        let z0 = -h;
        let z2 = z0 * z0;
        // Unit inward normals of the four edge planes (module docs), as (x, y, z) triples.
        let l0 = (z2 + y0 * y0).sqrt();
        let l1 = (z2 + x1 * x1).sqrt();
        let l2 = (z2 + y1 * y1).sqrt();
        let l3 = (z2 + x0 * x0).sqrt();
        let n0 = (0.0, z0 / l0, -y0 / l0);
        let n1 = (-z0 / l1, 0.0, x1 / l1);
        let n2 = (0.0, -z0 / l2, y1 / l2);
        let n3 = (z0 / l3, 0.0, -x0 / l3);
        let dot = |a: (f64, f64, f64), b: (f64, f64, f64)| a.0 * b.0 + a.1 * b.1 + a.2 * b.2;
        let angle = |a, b| (-dot(a, b)).clamp(-1.0, 1.0).acos();
        let g0 = angle(n0, n1);
        let g1 = angle(n1, n2);
        let g2 = angle(n2, n3);
        let g3 = angle(n3, n0);
        let k = TAU - g2 - g3;
        let solid_angle = (g0 + g1 - k).max(0.0);
        Self { x0, x1, y0, y1, z0, b0: n0.2, b1: n2.2, k, solid_angle }
    }

    /// The point (x, y) of the rectangle for (ξ1, ξ2) ∈ [0, 1)²; its direction from the
    /// viewpoint, (x, y, −h)/r, is uniform in solid angle over the rectangle.
    #[inline]
    pub fn sample(&self, u1: f64, u2: f64) -> (f64, f64) {
        let au = u1 * self.solid_angle + self.k;
        let (sa, ca) = au.sin_cos();
        let fu = (ca * self.b0 - self.b1) / sa;
        let mut cu = (1.0 / (fu * fu + self.b0 * self.b0).sqrt()).copysign(fu);
        cu = cu.clamp(-1.0, 1.0);
        let mut xu = -(cu * self.z0) / (1.0 - cu * cu).sqrt().max(1e-300);
        if !xu.is_finite() {
            // sin α = 0 exactly (α = π): the bisecting edge x = 0.
            xu = 0.0;
        }
        xu = xu.clamp(self.x0, self.x1);
        let d2 = xu * xu + self.z0 * self.z0;
        let d = d2.sqrt();
        let h0 = self.y0 / (d2 + self.y0 * self.y0).sqrt();
        let h1 = self.y1 / (d2 + self.y1 * self.y1).sqrt();
        let hv = h0 + u2 * (h1 - h0);
        let hv2 = hv * hv;
        let yv = if hv2 < 1.0 - 1e-14 { hv * d / (1.0 - hv2).sqrt() } else { self.y1 };
        (xu, yv.clamp(self.y0, self.y1))
    }
}

/// Solid angle (sr) of the rectangle [x0, x1] × [y0, y1] at distance `h` > 0, by the corner
/// formula Ω = F(x1, y1) − F(x0, y1) − F(x1, y0) + F(x0, y0), F(x, y) = atan(x y / (h √(x² + y² + h²)))
/// (the solid angle of the rectangle [0, x] × [0, y] seen from above its corner, signed).
#[inline]
pub fn solid_angle(x0: f64, x1: f64, y0: f64, y1: f64, h: f64) -> f64 {
    corner(x1, y1, h) - corner(x0, y1, h) - corner(x1, y0, h) + corner(x0, y0, h)
}

/// F(x, y) of [`solid_angle`].
#[inline]
pub fn corner(x: f64, y: f64, h: f64) -> f64 {
    (x * y / (h * (x * x + y * y + h * h).sqrt())).atan()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::history_stream;

    /// The Girard solid angle equals the closed-form corner sum, and for a centred square the
    /// textbook on-axis formula 4 asin(ab / √((a² + h²)(b² + h²))) (a, b half-sides).
    #[test]
    fn solid_angle_matches_closed_forms() {
        let cases = [(-2.5, 2.5, -2.5, 2.5, 2.0), (-20.0, -2.5, -20.0, 20.0, 3.0), (1.0, 7.0, 2.0, 3.0, 0.5), (-0.1, 0.1, -0.1, 0.1, 100.0), (3.0, 40.0, -40.0, -3.0, 22.0)];
        for (x0, x1, y0, y1, h) in cases {
            let s = SphericalRect::new(x0, x1, y0, y1, h).solid_angle;
            let c = solid_angle(x0, x1, y0, y1, h);
            assert!((s - c).abs() <= 1e-12 * c.max(1e-3), "rect {x0} {x1} {y0} {y1} at {h}: Girard {s} corner {c}");
        }
        let (a, b, h): (f64, f64, f64) = (2.5, 4.0, 7.0);
        let exact = 4.0 * (a * b / ((a * a + h * h) * (b * b + h * h)).sqrt()).asin();
        let s = SphericalRect::new(-a, a, -b, b, h).solid_angle;
        assert!((s - exact).abs() < 1e-13, "{s} vs {exact}");
    }

    /// Girard's formula against the corner formula over 20 000 random
    /// rectangles and viewpoints (fixed seed): far and near, centred and far off to one side,
    /// where the interior angles approach 0 and π. Criterion: |Ω − Ω_corner| ≤ 1e-12 + 1e-9 Ω
    /// (both are differences of angles of order π, so their absolute rounding is ~1e-15).
    #[test]
    fn solid_angle_matches_corner_formula_at_random() {
        let mut rng = history_stream(20261204, 1);
        for _ in 0..20_000 {
            let scale = 10f64.powf(rng.uniform() * 4.0 - 2.0);
            let mut side = || {
                let a = (rng.uniform() - 0.5) * 2.0 * scale;
                (a, a + rng.uniform() * scale + 1e-6)
            };
            let (x0, x1) = side();
            let (y0, y1) = side();
            let h = scale * 10f64.powf(rng.uniform() * 5.0 - 3.0);
            let s = SphericalRect::new(x0, x1, y0, y1, h).solid_angle;
            let c = solid_angle(x0, x1, y0, y1, h);
            assert!((s - c).abs() <= 1e-12 + 1e-9 * c, "rect {x0} {x1} {y0} {y1} at {h}: Girard {s} corner {c}");
        }
    }

    /// Sampled points lie in the rectangle, and their directions are uniform in solid angle:
    /// 8 × 8 cells of the rectangle, expected count N·Ω_cell/Ω (Ω_cell by the corner formula),
    /// χ² below the 99.9th percentile of χ²(63) ≈ 103.4 (standard tables), fixed seed; for a
    /// near viewpoint off to one side, where area and solid angle differ by a factor > 20
    /// across the rectangle.
    #[test]
    fn samples_are_inside_and_uniform_in_solid_angle() {
        for &(x0, x1, y0, y1, h) in &[(-3.0, 17.0, -1.0, 4.0, 0.7), (-2.5, 2.5, -2.5, 2.5, 2.0), (5.0, 6.0, -20.0, 20.0, 1.5)] {
            let r = SphericalRect::new(x0, x1, y0, y1, h);
            let cells = 8usize;
            let mut count = vec![0f64; cells * cells];
            let n = 400_000;
            let mut rng = history_stream(5, 0);
            for _ in 0..n {
                let (x, y) = r.sample(rng.uniform(), rng.uniform());
                assert!(x >= x0 && x <= x1 && y >= y0 && y <= y1, "({x}, {y}) outside the rectangle");
                let i = (((x - x0) / (x1 - x0) * cells as f64) as usize).min(cells - 1);
                let j = (((y - y0) / (y1 - y0) * cells as f64) as usize).min(cells - 1);
                count[j * cells + i] += 1.0;
            }
            let mut chi2 = 0.0;
            let mut min_max = (f64::MAX, 0f64);
            for j in 0..cells {
                for i in 0..cells {
                    let (a0, a1) = (x0 + (x1 - x0) * i as f64 / cells as f64, x0 + (x1 - x0) * (i + 1) as f64 / cells as f64);
                    let (c0, c1) = (y0 + (y1 - y0) * j as f64 / cells as f64, y0 + (y1 - y0) * (j + 1) as f64 / cells as f64);
                    let p = solid_angle(a0, a1, c0, c1, h) / r.solid_angle;
                    min_max = (min_max.0.min(p), min_max.1.max(p));
                    let e = p * n as f64;
                    chi2 += (count[j * cells + i] - e).powi(2) / e;
                }
            }
            assert!(chi2 < 103.4, "rect {x0} {x1} {y0} {y1} at {h}: chi2 {chi2}");
            if h == 0.7 {
                assert!(min_max.1 / min_max.0 > 20.0, "the test case should be far from uniform in area");
            }
        }
    }

    /// The estimator g(ω)·Ω with ω uniform in solid angle has the mean ∫ g dω: a smooth test
    /// density g(ω) = (1 + 3 cos²ψ)/(4π)·(1 + x/10) (ψ the angle to a fixed axis, x the face
    /// abscissa) from a near viewpoint, against brute-force quadrature over the rectangle
    /// (2000² midpoint cells, dω = h dA / r³). Criterion: |z| < 4 with the sample's own σ.
    #[test]
    fn solid_angle_estimator_matches_quadrature() {
        let (x0, x1, y0, y1, h) = (-6.0, 14.0, -3.0, 9.0, 1.3);
        let axis = (0.3f64, -0.2f64, -0.933f64);
        let an = (axis.0 * axis.0 + axis.1 * axis.1 + axis.2 * axis.2).sqrt();
        let g = |x: f64, y: f64| {
            let r = (x * x + y * y + h * h).sqrt();
            let c = (x * axis.0 + y * axis.1 - h * axis.2) / (r * an);
            (1.0 + 3.0 * c * c) / (4.0 * std::f64::consts::PI) * (1.0 + x / 10.0)
        };
        let m = 2000;
        let (dx, dy) = ((x1 - x0) / m as f64, (y1 - y0) / m as f64);
        let mut quad = 0.0;
        for j in 0..m {
            let y = y0 + (j as f64 + 0.5) * dy;
            for i in 0..m {
                let x = x0 + (i as f64 + 0.5) * dx;
                let r2 = x * x + y * y + h * h;
                quad += g(x, y) * h / (r2 * r2.sqrt()) * dx * dy;
            }
        }
        let r = SphericalRect::new(x0, x1, y0, y1, h);
        let mut rng = history_stream(9, 1);
        let n = 1_000_000;
        let (mut s, mut s2) = (0.0, 0.0);
        for _ in 0..n {
            let (x, y) = r.sample(rng.uniform(), rng.uniform());
            let v = g(x, y) * r.solid_angle;
            s += v;
            s2 += v * v;
        }
        let mean = s / n as f64;
        let sigma = ((s2 / n as f64 - mean * mean) / (n as f64 - 1.0)).sqrt();
        let z = (mean - quad) / sigma;
        assert!(z.abs() < 4.0, "MC {mean} ± {sigma} vs quadrature {quad} (z = {z})");
        assert!(sigma / mean < 2e-3, "the test should be sharp: relative σ {}", sigma / mean);
    }
}

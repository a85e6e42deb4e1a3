//! Gauss–Legendre quadrature nodes, computed once by Newton iteration on the Legendre polynomials.

/// Nodes and weights of an n-point Gauss–Legendre rule on [−1, 1].
#[derive(Debug, Clone)]
pub(crate) struct GaussLegendre {
    /// Nodes in (−1, 1), ascending.
    pub nodes: Vec<f64>,
    /// Weights, summing to 2.
    pub weights: Vec<f64>,
}

impl GaussLegendre {
    /// The n-point rule (n ≥ 1).
    pub fn new(n: usize) -> Self {
        assert!(n >= 1, "Gauss–Legendre rule needs at least one node");
        let mut nodes = vec![0.0; n];
        let mut weights = vec![0.0; n];
        let nf = n as f64;
        for i in 0..n.div_ceil(2) {
            // Initial guess (Tricomi), then Newton on P_n.
            let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (nf + 0.5)).cos();
            let mut dp = 1.0;
            for _ in 0..100 {
                let (p, d) = legendre_and_derivative(n, x);
                dp = d;
                let dx = p / d;
                x -= dx;
                if dx.abs() < 1e-15 {
                    break;
                }
            }
            let (_, d) = legendre_and_derivative(n, x);
            dp = if d.is_finite() { d } else { dp };
            let w = 2.0 / ((1.0 - x * x) * dp * dp);
            nodes[i] = -x;
            nodes[n - 1 - i] = x;
            weights[i] = w;
            weights[n - 1 - i] = w;
        }
        Self { nodes, weights }
    }

    /// ∫_a^b f(x) dx by this rule.
    pub fn integrate(&self, a: f64, b: f64, mut f: impl FnMut(f64) -> f64) -> f64 {
        let half = 0.5 * (b - a);
        let mid = 0.5 * (a + b);
        let mut sum = 0.0;
        for (x, w) in self.nodes.iter().zip(&self.weights) {
            sum += w * f(mid + half * x);
        }
        sum * half
    }
}

/// P_n(x) and P_n'(x) by the three-term recurrence.
fn legendre_and_derivative(n: usize, x: f64) -> (f64, f64) {
    let mut p0 = 1.0;
    let mut p1 = x;
    if n == 0 {
        return (1.0, 0.0);
    }
    for k in 2..=n {
        let kf = k as f64;
        let p2 = ((2.0 * kf - 1.0) * x * p1 - (kf - 1.0) * p0) / kf;
        p0 = p1;
        p1 = p2;
    }
    let d = n as f64 * (x * p1 - p0) / (x * x - 1.0);
    (p1, d)
}

#[cfg(test)]
mod tests {
    use super::*;

    // Exactness for polynomials of degree ≤ 2n − 1 is the defining property of the rule.
    #[test]
    fn exact_for_polynomials_up_to_degree_2n_minus_1() {
        for n in [1usize, 2, 5, 8, 24] {
            let g = GaussLegendre::new(n);
            let s: f64 = g.weights.iter().sum();
            assert!((s - 2.0).abs() < 1e-13, "n={n} weights sum {s}");
            let deg = 2 * n - 1;
            let got = g.integrate(0.0, 1.0, |x| x.powi(deg as i32));
            let want = 1.0 / (deg as f64 + 1.0);
            assert!((got - want).abs() < 1e-12, "n={n}: {got} vs {want}");
        }
    }
}

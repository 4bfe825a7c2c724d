//! Quadrature rules on [0, 1] for path integrals: the midpoint rule and Gauss-Legendre.

use serde::Serialize;

/// How the path integral is approximated.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Rule {
    /// m equal steps, gradient at each step's midpoint (error ~1/m^2 on smooth paths).
    Midpoint,
    /// m-point Gauss-Legendre (exact for polynomials of degree 2m-1).
    GaussLegendre,
}

impl Rule {
    /// Parse a command-line name.
    pub fn parse(s: &str) -> Option<Rule> {
        match s {
            "midpoint" => Some(Rule::Midpoint),
            "gauss-legendre" => Some(Rule::GaussLegendre),
            _ => None,
        }
    }

    /// Nodes and weights on [0, 1] for `m` points (weights sum to 1).
    pub fn nodes(self, m: usize) -> Vec<(f64, f64)> {
        match self {
            Rule::Midpoint => (0..m).map(|k| ((k as f64 + 0.5) / m as f64, 1.0 / m as f64)).collect(),
            Rule::GaussLegendre => gauss_legendre(m),
        }
    }
}

/// Gauss-Legendre nodes and weights mapped to [0, 1]: Newton's method on the Legendre
/// polynomial P_m from Chebyshev-like starting points (Abramowitz & Stegun 25.4.29 for the
/// weights, w_i = 2 / ((1 - x_i^2) P_m'(x_i)^2) on [-1, 1]).
fn gauss_legendre(m: usize) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(m);
    for i in 0..m {
        let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (m as f64 + 0.5)).cos();
        let mut dp = 1.0;
        for _ in 0..100 {
            // Recurrence: (k+1) P_{k+1} = (2k+1) x P_k - k P_{k-1}.
            let (mut p0, mut p1) = (1.0, x);
            for k in 1..m {
                let p2 = ((2 * k + 1) as f64 * x * p1 - k as f64 * p0) / (k + 1) as f64;
                p0 = p1;
                p1 = p2;
            }
            let (p, prev) = if m == 0 {
                (1.0, 0.0)
            } else if m == 1 {
                (x, 1.0)
            } else {
                (p1, p0)
            };
            dp = m as f64 * (x * p - prev) / (x * x - 1.0);
            let step = p / dp;
            x -= step;
            if step.abs() < 1e-15 {
                break;
            }
        }
        let w = 2.0 / ((1.0 - x * x) * dp * dp);
        out.push(((1.0 - x) / 2.0, w / 2.0));
    }
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gauss_legendre_matches_tabulated_nodes() {
        // Two points on [-1, 1]: +-1/sqrt(3), weights 1 (Abramowitz & Stegun, table 25.4).
        let n = gauss_legendre(2);
        assert!((n[0].0 - (1.0 - 1.0 / 3f64.sqrt()) / 2.0).abs() < 1e-14);
        assert!((n[0].1 - 0.5).abs() < 1e-14);
        // Three points: 0 and +-sqrt(3/5), weights 8/9 and 5/9 (same table).
        let n = gauss_legendre(3);
        assert!((n[1].0 - 0.5).abs() < 1e-14 && (n[1].1 - 4.0 / 9.0).abs() < 1e-14);
        assert!((n[2].0 - (1.0 + (0.6f64).sqrt()) / 2.0).abs() < 1e-14);
    }

    #[test]
    fn rules_integrate_polynomials_as_their_order_promises() {
        let f = |x: f64| 7.0 * x.powi(9) - 3.0 * x.powi(4) + 1.0; // integral on [0,1] = 0.7 - 0.6 + 1
        let gl: f64 = Rule::GaussLegendre.nodes(5).iter().map(|(x, w)| w * f(*x)).sum();
        assert!((gl - 1.1).abs() < 1e-13, "degree 9 is exact with 5 points: {gl}");
        for m in [64usize, 1024] {
            let s: f64 = Rule::GaussLegendre.nodes(m).iter().map(|(_, w)| w).sum();
            assert!((s - 1.0).abs() < 1e-12, "{m} weights sum to {s}");
        }
        let e1 = (Rule::Midpoint.nodes(10).iter().map(|(x, w)| w * f(*x)).sum::<f64>() - 1.1).abs();
        let e2 = (Rule::Midpoint.nodes(20).iter().map(|(x, w)| w * f(*x)).sum::<f64>() - 1.1).abs();
        assert!((e1 / e2 - 4.0).abs() < 0.2, "midpoint error falls as 1/m^2: ratio {}", e1 / e2);
    }
}

//! The Q² shapes: dipole and z-expansion, with analytic gradients (docs/methods.md §6).
//!
//! They live apart from the fit driver in [`super`] so that the solver sees only a
//! parameter vector, values and a gradient. The dipole `G(0) (1 + Q²/M²)^-n` is the
//! traditional form (common practice); the z-expansion is that of Hill & Paz, Phys. Rev. D 82
//! (2010) 113005, with the large-Q² sum rules of Lee, Arrington & Hill, Phys. Rev. D 92 (2015)
//! 013013.

use crate::fit::Prior;
use serde::Serialize;

/// The conformal variable of the z-expansion (Hill & Paz, Phys. Rev. D 82 (2010) 113005):
/// `z = (sqrt(t_cut + Q²) - sqrt(t_cut - t0)) / (sqrt(t_cut + Q²) + sqrt(t_cut - t0))`.
pub fn z(q2: f64, t_cut: f64, t0: f64) -> f64 {
    let s = (t_cut + q2).sqrt();
    let c = (t_cut - t0).sqrt();
    (s - c) / (s + c)
}

/// `dz/dQ²` at `q2`.
pub fn dz_dq2(q2: f64, t_cut: f64, t0: f64) -> f64 {
    let s = (t_cut + q2).sqrt();
    let c = (t_cut - t0).sqrt();
    c / (s * (s + c) * (s + c))
}

/// The `t0` that minimises the largest `|z|` over `0 <= Q² <= q2_max`:
/// `t0 = t_cut (1 - sqrt(1 + q2_max / t_cut))`.
pub fn t0_optimal(t_cut: f64, q2_max: f64) -> f64 {
    t_cut * (1.0 - (1.0 + q2_max / t_cut).sqrt())
}

/// A Q² shape with its parameters' meaning fixed.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub enum Shape {
    /// `G(Q²) = G(0) / (1 + Q²/M²)^p`; parameters `[G(0), M²]`.
    Dipole {
        /// The exponent `p`.
        power: f64,
    },
    /// `G = a_0 sum_k b_k z^k`, `b_0 = 1`; parameters `[a_0, b_free...]`.
    ZExpansion(ZExpansion),
}

/// A z-expansion with its sum-rule constraints solved: the highest `sum_rules` coefficients
/// are eliminated, `b_dep = d0 + D b_free`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ZExpansion {
    /// `t_cut` in the units of Q².
    pub t_cut: f64,
    /// `t0` in the units of Q².
    pub t0: f64,
    /// Highest power `kmax`.
    pub kmax: usize,
    /// Number of sum rules `sum_k k^n a_k = 0`, `n = 0..sum_rules`.
    pub sum_rules: usize,
    /// Gaussian prior on each free `a_k / a_0`.
    pub prior: Option<Prior>,
    /// Squared mass `M²` of an explicit pole factor `1 / (1 + Q²/M²)` multiplying the series
    /// (for heavy pions, where a vector or axial meson lies below `t_cut`), units of Q².
    pub pole_mass2: Option<f64>,
    d0: Vec<f64>,
    dep: Vec<Vec<f64>>,
}

impl ZExpansion {
    /// Build the expansion; `None` when `sum_rules > kmax` or `sum_rules > 4`.
    pub fn new(
        t_cut: f64,
        t0: f64,
        kmax: usize,
        sum_rules: usize,
        prior: Option<Prior>,
    ) -> Option<Self> {
        if sum_rules > kmax || sum_rules > 4 {
            return None;
        }
        let n_free = kmax - sum_rules;
        // Rows n = 0..sum_rules: sum_{k=0}^{kmax} k^n b_k = 0, with b_0 = 1 (k^0 = 1 at k = 0).
        let m = |n: usize, k: usize| (k as f64).powi(n as i32);
        let md = nalgebra::DMatrix::from_fn(sum_rules, sum_rules, |n, d| m(n, n_free + 1 + d));
        let mf = nalgebra::DMatrix::from_fn(sum_rules, n_free, |n, j| m(n, j + 1));
        let c = nalgebra::DVector::from_fn(sum_rules, |n, _| if n == 0 { 1.0 } else { 0.0 });
        let (d0, dep) = if sum_rules == 0 {
            (Vec::new(), Vec::new())
        } else {
            let inv = md.try_inverse()?;
            let d0 = -(&inv * c);
            let dm = -(&inv * mf);
            (
                d0.iter().copied().collect(),
                (0..sum_rules)
                    .map(|d| dm.row(d).iter().copied().collect())
                    .collect(),
            )
        };
        Some(ZExpansion {
            t_cut,
            t0,
            kmax,
            sum_rules,
            prior,
            pole_mass2: None,
            d0,
            dep,
        })
    }

    /// The same expansion multiplied by the pole factor `1 / (1 + Q²/M²)`.
    pub fn with_pole(mut self, mass2: Option<f64>) -> Self {
        self.pole_mass2 = mass2;
        self
    }

    /// The pole factor at `q2` (1 without a pole).
    pub fn pole_factor(&self, q2: f64) -> f64 {
        self.pole_mass2.map_or(1.0, |m2| 1.0 / (1.0 + q2 / m2))
    }

    /// Number of free `b_k` (`kmax - sum_rules`).
    pub fn n_free(&self) -> usize {
        self.kmax - self.sum_rules
    }

    /// All coefficients `b_0 = 1, b_1, ..., b_kmax` from the free ones.
    pub fn b_all(&self, free: &[f64]) -> Vec<f64> {
        let mut b = Vec::with_capacity(self.kmax + 1);
        b.push(1.0);
        b.extend_from_slice(free);
        for (d0, row) in self.d0.iter().zip(&self.dep) {
            b.push(d0 + row.iter().zip(free).map(|(a, x)| a * x).sum::<f64>());
        }
        b
    }

    /// `d b_k / d b_free_j` for every k (row) and free j (column).
    fn db(&self, k: usize, j: usize) -> f64 {
        let nf = self.n_free();
        match k {
            0 => 0.0,
            k if k <= nf => f64::from(u8::from(k == j + 1)),
            k => self.dep[k - nf - 1][j],
        }
    }
}

impl Shape {
    /// Number of parameters.
    pub fn n_params(&self) -> usize {
        match self {
            Shape::Dipole { .. } => 2,
            Shape::ZExpansion(e) => 1 + e.n_free(),
        }
    }

    /// Parameter names for tables.
    pub fn names(&self) -> Vec<String> {
        match self {
            Shape::Dipole { .. } => vec!["G0".into(), "M2".into()],
            Shape::ZExpansion(e) => std::iter::once("a0".to_string())
                .chain((1..=e.n_free()).map(|k| format!("a{k}/a0")))
                .collect(),
        }
    }

    /// `G(Q²)`.
    pub fn value(&self, p: &[f64], q2: f64) -> f64 {
        match self {
            Shape::Dipole { power } => p[0] * (1.0 + q2 / p[1]).powf(-power),
            Shape::ZExpansion(e) => {
                let z = z(q2, e.t_cut, e.t0);
                e.pole_factor(q2)
                    * p[0]
                    * e.b_all(&p[1..])
                        .iter()
                        .rev()
                        .fold(0.0, |acc, b| acc * z + b)
            }
        }
    }

    /// Gradient of `G(Q²)` with respect to the parameters.
    pub fn gradient(&self, p: &[f64], q2: f64, out: &mut [f64]) {
        match self {
            Shape::Dipole { power } => {
                let x = 1.0 + q2 / p[1];
                out[0] = x.powf(-power);
                out[1] = p[0] * power * q2 / (p[1] * p[1]) * x.powf(-power - 1.0);
            }
            Shape::ZExpansion(e) => {
                let z = z(q2, e.t_cut, e.t0);
                let b = e.b_all(&p[1..]);
                let pole = e.pole_factor(q2);
                out[0] = pole * b.iter().rev().fold(0.0, |acc, b| acc * z + b);
                for (j, o) in out[1..].iter_mut().enumerate() {
                    *o = pole
                        * p[0]
                        * (1..=e.kmax)
                            .map(|k| e.db(k, j) * z.powi(k as i32))
                            .sum::<f64>();
                }
            }
        }
    }

    /// `dG/dQ²` at `Q² = 0`.
    pub fn slope0(&self, p: &[f64]) -> f64 {
        match self {
            Shape::Dipole { power } => -power * p[0] / p[1],
            Shape::ZExpansion(e) => {
                let z0 = z(0.0, e.t_cut, e.t0);
                let b = e.b_all(&p[1..]);
                let dgdz: f64 = (1..=e.kmax)
                    .map(|k| k as f64 * b[k] * z0.powi(k as i32 - 1))
                    .sum();
                let series0: f64 = b.iter().rev().fold(0.0, |acc, b| acc * z0 + b);
                let pole_slope = e.pole_mass2.map_or(0.0, |m2| -1.0 / m2);
                p[0] * (dgdz * dz_dq2(0.0, e.t_cut, e.t0) + pole_slope * series0)
            }
        }
    }

    /// Priors, one entry per parameter.
    pub fn priors(&self) -> Vec<Option<Prior>> {
        match self {
            Shape::Dipole { .. } => vec![None, None],
            Shape::ZExpansion(e) => std::iter::once(None)
                .chain(std::iter::repeat_n(e.prior, e.n_free()))
                .collect(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    // Analytic gradients against central finite differences (common practice for Jacobians).
    #[test]
    fn gradients_match_finite_differences() {
        let shapes = [
            (Shape::Dipole { power: 2.0 }, vec![1.1, 0.7]),
            (Shape::Dipole { power: 1.3 }, vec![0.9, 0.4]),
            (
                Shape::ZExpansion(ZExpansion::new(0.08, -0.2, 5, 2, None).expect("valid")),
                vec![1.2, -0.8, 0.5, 0.3],
            ),
            (
                Shape::ZExpansion(ZExpansion::new(0.08, 0.0, 3, 0, None).expect("valid")),
                vec![0.9, -1.5, 0.7, 0.2],
            ),
            (
                Shape::ZExpansion(
                    ZExpansion::new(0.08, -0.1, 3, 1, None)
                        .expect("valid")
                        .with_pole(Some(0.3)),
                ),
                vec![0.9, -1.5, 0.7],
            ),
        ];
        for (shape, p) in shapes {
            let mut g = vec![0.0; p.len()];
            for q2 in [0.0, 0.05, 0.3, 1.0] {
                shape.gradient(&p, q2, &mut g);
                for j in 0..p.len() {
                    let h = 1e-6;
                    let mut pp = p.clone();
                    pp[j] += h;
                    let up = shape.value(&pp, q2);
                    pp[j] -= 2.0 * h;
                    let dn = shape.value(&pp, q2);
                    let fd = (up - dn) / (2.0 * h);
                    assert!(
                        (g[j] - fd).abs() < 1e-7 * (1.0 + fd.abs()),
                        "{shape:?} q2={q2} j={j}: {} vs {fd}",
                        g[j]
                    );
                }
            }
            // slope0 against a one-sided difference in Q^2 (forward, Q^2 >= 0).
            let h = 1e-7;
            let fd = (shape.value(&p, h) - shape.value(&p, 0.0)) / h;
            assert_relative_eq!(shape.slope0(&p), fd, max_relative = 1e-4);
        }
    }

    // The sum rules sum_k k^n a_k = 0, n < sum_rules, hold for any free coefficients
    // (Lee, Arrington & Hill, PRD 92 (2015) 013013, eq. for the large-Q^2 constraints).
    #[test]
    fn sum_rules_hold_exactly() {
        for n_sr in 1..=4 {
            let e = ZExpansion::new(0.1, 0.0, 7, n_sr, None).expect("valid");
            let free: Vec<f64> = (0..e.n_free()).map(|j| 0.3 * j as f64 - 0.7).collect();
            let b = e.b_all(&free);
            for n in 0..n_sr {
                let s: f64 = b
                    .iter()
                    .enumerate()
                    .map(|(k, bk)| (k as f64).powi(n as i32) * bk)
                    .sum();
                assert!(s.abs() < 1e-9, "n_sr={n_sr} n={n}: {s}");
            }
        }
        assert!(ZExpansion::new(0.1, 0.0, 2, 3, None).is_none());
    }
}

//! The correlators of an operator basis for the mock generator: several interpolating
//! operators, each coupling to the states with its own overlaps, so the two-point functions
//! form an `N x N` matrix and the three-point functions connect any sink operator with any
//! source operator (the data of the variational method, docs/methods.md §2).
//!
//! With `Z_{a,n}(p) = Z_{a,n}(0) e^{-|p|^2 w^2 / 4}` (the hadron's smearing width `w`):
//! - `C2_ab(t, p) = sum_n Z_{a,n}(p) Z_{b,n}(p) e^{-E_n(p) t}`,
//! - `C3_ab(tsep, tau) = Pi sum_{m,n} r_{mn} Z_{a,m}(p_f) Z_{b,n}(p_i) e^{-E_m(p_f)(tsep - tau) - E_n(p_i) tau}`,
//!
//! the single-operator model of [`super::model`] with the overlaps of one operator (a
//! single operator with positive overlaps gives exactly the model's correlators).
//!
//! Noise: every element's noise mixes a part shared by all elements of a correlator (weight
//! `noise_correlation`) with an own part (symmetric pairs of a two-point matrix share it), the
//! size set by the diagonal elements: `sigma_ab = s e^{g t} sqrt(|C2_aa C2_bb|)` for the
//! two-point and `s e^{g_f (tsep - tau) + g_i tau} n_a(p_f) n_b(p_i) e^{-E_0(p_f)(tsep - tau) - E_0(p_i) tau}`
//! with `n_a = sqrt(sum_n Z_{a,n}^2)` for the three-point functions.

use super::model::MomentumLevels;
use super::spec::BasisSpec;

impl BasisSpec {
    /// `Z_{a,n}(p)` of operator `a` at the momentum of `levels`, smearing width `w`.
    pub fn overlap(&self, a: usize, n: usize, levels: &MomentumLevels, w: f64) -> f64 {
        let p2: f64 = levels.p.iter().map(|x| x * x).sum();
        self.basis[a].overlaps[n] * (-p2 * w * w / 4.0).exp()
    }

    /// Mean `C2_ab(t)` at the momentum of `levels`.
    pub fn twopt_mean(&self, a: usize, b: usize, levels: &MomentumLevels, w: f64, t: usize) -> f64 {
        (0..levels.levels.len())
            .map(|n| {
                self.overlap(a, n, levels, w)
                    * self.overlap(b, n, levels, w)
                    * (-levels.levels[n].energy * t as f64).exp()
            })
            .sum()
    }

    /// Mean `C3_ab(tsep, tau) / Pi` for transition strengths `r[m][n]`.
    #[allow(clippy::too_many_arguments)]
    pub fn threept_factor(
        &self,
        (a, b): (usize, usize),
        sink: &MomentumLevels,
        source: &MomentumLevels,
        w: f64,
        tsep: usize,
        tau: usize,
        r: &[Vec<f64>],
    ) -> f64 {
        let mut sum = 0.0;
        for (m, f) in sink.levels.iter().enumerate() {
            for (n, i) in source.levels.iter().enumerate() {
                if r[m][n] != 0.0 {
                    sum += r[m][n]
                        * self.overlap(a, m, sink, w)
                        * self.overlap(b, n, source, w)
                        * (-f.energy * (tsep - tau) as f64 - i.energy * tau as f64).exp();
                }
            }
        }
        sum
    }

    /// `n_a(p) = sqrt(sum_n Z_{a,n}(p)^2)`, the size of operator `a`'s noise.
    pub fn norm(&self, a: usize, levels: &MomentumLevels, w: f64) -> f64 {
        (0..levels.levels.len())
            .map(|n| self.overlap(a, n, levels, w).powi(2))
            .sum::<f64>()
            .sqrt()
    }
}

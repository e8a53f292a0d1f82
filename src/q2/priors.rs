//! z-expansion priors: the default width, the prior's share of every resample, and the
//! diagnostics that say when a coefficient is decided by its prior rather than by the data.
//!
//! Why it exists: a Gaussian prior on `a_k / a_0` is part of the fit's information. Fitting
//! every resample with the prior centre held fixed leaves its uncertainty out of the error, so
//! the resampled errors come out smaller than the Bayesian posterior error. Here the prior
//! centre of resample `j` is shifted by a draw from `N(0, width² / (N - 1))` (jackknife) or
//! `N(0, width²)` (bootstrap), which reproduces the posterior covariance
//! `(J^T W J + P)^-1` for a linear model with Gaussian data (Lepage et al., Nucl. Phys. Proc.
//! Suppl. 106 (2002) 12, "constrained curve fitting"; the random-prior resampling is common
//! practice). The draws are moment-matched (zero mean and exactly the target variance over
//! the resamples), so the prior contributes exactly `width²` to each coefficient's variance.
//!
//! Default width ("auto"): published analyses bound `|a_k / a_0|` by a few times the largest
//! coefficient that a plausible model (a dipole) has when expanded in `z` for the same
//! `t_cut` and `t0` (Hill & Paz, Phys. Rev. D 82 (2010) 113005; Bhattacharya, Hill & Paz,
//! Phys. Rev. D 84 (2011) 073006; the value 5 of Lee, Arrington & Hill, Phys. Rev. D 92 (2015)
//! 013013, from memory). With a heavy pion `t_cut` is large, the data span a short range of
//! `z`, and the coefficients of the same curve are much larger, so a fixed width of 5 becomes
//! a strong constraint. The default therefore expands the central dipole fit of the data in
//! `z` (least squares over `0 <= Q² <= Q²_max`, degree `kmax`) and takes
//! `width = max(5, 2 max_k |c_k / c_0|)`.

use super::shapes::{z, Shape, ZExpansion};
use crate::fit::{FitReport, Prior};
use crate::resample::Scheme;
use nalgebra::{DMatrix, DVector};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};
use statrs::distribution::Normal;

/// The smallest default width (Lee, Arrington & Hill's bound, from memory).
pub const MIN_AUTO_WIDTH: f64 = 5.0;
/// Safety factor on the largest dipole coefficient.
pub const AUTO_FACTOR: f64 = 2.0;
/// A coefficient is prior-dominated when its posterior error exceeds this share of the prior
/// width (the data narrow the prior by less than 30 %).
pub const PRIOR_DOMINATED: f64 = 0.7;
/// A coefficient is at its prior's edge when it lies more than this many widths from the
/// prior mean.
pub const PRIOR_EDGE: f64 = 2.0;

/// Seed of the prior-centre draws (fixed, so runs reproduce).
const PRIOR_SEED: u64 = 0x5a70_7269_6f72;

/// The prior on every free `a_k / a_0` of a z-expansion.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(untagged)]
pub enum ZPrior {
    /// A rule that sets the width from the data's range in `z` (see the module docs).
    Rule(PriorRule),
    /// An explicit mean and width.
    Fixed(Prior),
}

/// Rules for the default prior.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum PriorRule {
    /// Mean 0, width `max(5, 2 max_k |c_k / c_0|)` from the central dipole fit expanded in `z`.
    Auto,
}

impl Default for ZPrior {
    fn default() -> Self {
        ZPrior::Rule(PriorRule::Auto)
    }
}

/// The coefficients `c_k / c_0`, `k = 1..=kmax`, of the least-squares polynomial in `z` of
/// degree `kmax` to `g(Q²)` over `0 <= Q² <= q2_max` (the pole factor of `e`, if any, divided
/// out first). `None` when the system is degenerate.
pub fn z_coefficients(e: &ZExpansion, q2_max: f64, g: impl Fn(f64) -> f64) -> Option<Vec<f64>> {
    let n = 60.max(4 * (e.kmax + 1));
    let grid: Vec<f64> = (0..n).map(|i| q2_max * i as f64 / (n - 1) as f64).collect();
    let a = DMatrix::from_fn(n, e.kmax + 1, |i, k| {
        z(grid[i], e.t_cut, e.t0).powi(k as i32)
    });
    let y = DVector::from_fn(n, |i, _| g(grid[i]) / e.pole_factor(grid[i]));
    let c = a.svd(true, true).solve(&y, 1e-12).ok()?;
    (c[0].abs() > 0.0 && c.iter().all(|v| v.is_finite()))
        .then(|| c.iter().skip(1).map(|v| v / c[0]).collect())
}

/// The default ("auto") prior for `e` given a dipole `(G0, M²)` fitted to the same points.
pub fn auto_prior(e: &ZExpansion, q2_max: f64, dipole: Option<(f64, f64)>) -> (Prior, String) {
    let coefficients = dipole.and_then(|(g0, m2)| {
        let shape = Shape::Dipole { power: 2.0 };
        z_coefficients(e, q2_max.max(f64::EPSILON), |q2| shape.value(&[g0, m2], q2))
    });
    match coefficients {
        Some(c) => {
            let largest = c.iter().fold(0.0f64, |m, v| m.max(v.abs()));
            let width = MIN_AUTO_WIDTH.max(AUTO_FACTOR * largest);
            (
                Prior::new(0.0, width),
                format!(
                    "a_k/a_0 ~ N(0, {width:.3}^2): max(5, 2 x {largest:.3}), the largest |c_k/c_0| of the central dipole fit expanded in z (t_cut = {:.5}, t0 = {:.5}, kmax = {})",
                    e.t_cut, e.t0, e.kmax
                ),
            )
        }
        None => (
            Prior::new(0.0, MIN_AUTO_WIDTH),
            "a_k/a_0 ~ N(0, 5^2): the dipole reference fit failed, so the published default width is used".to_string(),
        ),
    }
}

/// Per-resample shifts of the prior centres: `shifts[j][k]` for resample `j` and prior `k`,
/// in units of the prior width, with zero mean and unit resampled variance over `j` for each
/// `k` (jackknife `(N-1)/N sum`, bootstrap `1/(B-1) sum`). Deterministic.
pub fn centre_shifts(n_samples: usize, n_priors: usize, scheme: Scheme) -> Vec<Vec<f64>> {
    let mut rng = ChaCha8Rng::seed_from_u64(PRIOR_SEED);
    let normal = Normal::standard();
    let mut shifts: Vec<Vec<f64>> = (0..n_samples)
        .map(|_| {
            (0..n_priors)
                .map(|_| rand::Rng::sample(&mut rng, normal))
                .collect()
        })
        .collect();
    if n_samples < 2 {
        return vec![vec![0.0; n_priors]; n_samples];
    }
    let n = n_samples as f64;
    for k in 0..n_priors {
        let mean = shifts.iter().map(|s| s[k]).sum::<f64>() / n;
        let ss: f64 = shifts.iter().map(|s| (s[k] - mean).powi(2)).sum();
        let var = match scheme {
            Scheme::Jackknife => ss * (n - 1.0) / n,
            Scheme::Bootstrap => ss / (n - 1.0),
        };
        let scale = if var > 0.0 { var.sqrt().recip() } else { 0.0 };
        for s in &mut shifts {
            s[k] = (s[k] - mean) * scale;
        }
    }
    shifts
}

/// The priors of one resample: each centre moved by `shift * width`.
pub fn shifted(priors: &[Option<Prior>], shifts: &[f64]) -> Vec<Option<Prior>> {
    let mut k = 0;
    priors
        .iter()
        .map(|p| {
            p.map(|p| {
                let s = shifts.get(k).copied().unwrap_or(0.0);
                k += 1;
                Prior::new(p.mean + s * p.width, p.width)
            })
        })
        .collect()
}

/// Warnings for coefficients of the central fit that the data barely constrain (posterior
/// error above [`PRIOR_DOMINATED`] x width) or that sit at the edge of their prior (more than
/// [`PRIOR_EDGE`] widths from its mean).
pub fn diagnose(names: &[String], priors: &[Option<Prior>], central: &FitReport) -> Vec<String> {
    let mut out = Vec::new();
    for (k, p) in priors.iter().enumerate() {
        let Some(p) = p else { continue };
        let name = names.get(k).map_or("?", String::as_str);
        let value = central.params[k];
        if let Some(err) = central.error(k) {
            if err > PRIOR_DOMINATED * p.width {
                out.push(format!(
                    "{name} = {value:.4} is prior-dominated: posterior error {err:.3} against prior width {:.3}",
                    p.width
                ));
            }
        }
        let pull = (value - p.mean) / p.width;
        if pull.abs() > PRIOR_EDGE {
            out.push(format!(
                "{name} = {value:.4} lies {pull:.1} prior widths from the prior mean {}: the prior is too narrow or kmax too small",
                p.mean
            ));
        }
    }
    out
}

//! Least-squares fitting: problems separate from solvers (docs/methods.md §2).
//!
//! A [`Model`] states its parameters, its values at the data points and its analytic
//! Jacobian; it knows nothing of covariances or priors. [`Weights`] whiten residuals with a
//! triangular factor of the inverse covariance; Gaussian [`Prior`]s enter as extra residuals
//! `(x_k - prior_k) / width_k` ("constrained curve fitting", Lepage et al., Nucl. Phys. Proc.
//! Suppl. 106 (2002) 12). Non-linear problems go to Levenberg–Marquardt
//! ([`nonlinear::fit`], `levenberg-marquardt` crate); linear ones are solved in closed form by
//! SVD ([`linear::fit`]). Every non-linear fit returns a [`FitReport`] — converged or why not —
//! instead of failing the whole run.

pub mod linear;
pub mod nonlinear;
mod normal_equations;
mod response;
mod weights;

pub use nonlinear::FitSettings;
pub use response::Response;
pub use weights::{Weighting, Weights};

use nalgebra::{DMatrix, DVector};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// A fit model: parameters in, model values at every data point out.
pub trait Model: Sync {
    /// Number of parameters.
    fn n_params(&self) -> usize;
    /// Number of data points.
    fn n_points(&self) -> usize;
    /// Model values at every data point (`out.len() == n_points()`).
    fn eval(&self, params: &[f64], out: &mut [f64]);
    /// Jacobian `d model_i / d param_j`, shape `n_points x n_params`.
    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>);
}

/// A Gaussian prior on one parameter.
#[derive(
    Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize, schemars::JsonSchema,
)]
#[serde(deny_unknown_fields)]
pub struct Prior {
    /// Prior mean.
    pub mean: f64,
    /// Prior width (one standard deviation); must be positive.
    pub width: f64,
}

impl Prior {
    /// A prior from mean and width.
    pub fn new(mean: f64, width: f64) -> Self {
        Prior { mean, width }
    }

    /// True when the width is positive and both numbers are finite.
    pub fn is_valid(&self) -> bool {
        self.mean.is_finite() && self.width.is_finite() && self.width > 0.0
    }
}

/// The outcome of one non-linear fit.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct FitReport {
    /// Best-fit parameters (the starting values when the fit could not start).
    pub params: Vec<f64>,
    /// Total chi-square including prior terms.
    pub chi2: f64,
    /// Degrees of freedom: data points minus parameters (priors do not add dof).
    pub dof: i64,
    /// p-value from the chi-square distribution with `dof` degrees of freedom (NaN for
    /// `dof <= 0`).
    pub p_value: f64,
    /// Whether the solver reported convergence.
    pub converged: bool,
    /// Residual evaluations used by Levenberg–Marquardt.
    pub iterations: usize,
    /// Human-readable reason when not converged, empty otherwise.
    pub message: String,
    /// Parameter covariance `(J^T J)^{-1}` of the whitened residuals (priors included) at the
    /// minimum; `None` when singular. For unit weights multiply by `chi2 / dof` to get the
    /// usual unweighted-regression standard errors.
    #[serde(skip)]
    pub covariance: Option<DMatrix<f64>>,
}

impl FitReport {
    /// Standard error of parameter `k` from [`FitReport::covariance`], if available.
    pub fn error(&self, k: usize) -> Option<f64> {
        let c = self.covariance.as_ref()?;
        (k < c.nrows()).then(|| c[(k, k)].sqrt())
    }

    /// `chi2 / dof` (NaN for `dof <= 0`).
    pub fn chi2_per_dof(&self) -> f64 {
        if self.dof > 0 {
            self.chi2 / self.dof as f64
        } else {
            f64::NAN
        }
    }
}

/// Upper-tail probability of `chi2` for `dof` degrees of freedom; NaN when `dof <= 0` or
/// `chi2` is not finite.
pub fn p_value(chi2: f64, dof: i64) -> f64 {
    if dof <= 0 || !chi2.is_finite() {
        return f64::NAN;
    }
    match ChiSquared::new(dof as f64) {
        Ok(d) => d.sf(chi2.max(0.0)),
        Err(_) => f64::NAN,
    }
}

/// Validate a prior list: empty (no priors) or one entry per parameter, each valid.
pub(crate) fn check_priors(priors: &[Option<Prior>], n_params: usize) -> Result<(), String> {
    if !priors.is_empty() && priors.len() != n_params {
        return Err(format!(
            "{} priors given for {} parameters (give none or one per parameter)",
            priors.len(),
            n_params
        ));
    }
    for (k, p) in priors.iter().enumerate() {
        if let Some(p) = p {
            if !p.is_valid() {
                return Err(format!(
                    "prior on parameter {k} has mean {} and width {}; expected finite numbers and a positive width",
                    p.mean, p.width
                ));
            }
        }
    }
    Ok(())
}

/// The SVD of `A` with unit-norm columns, and the column norms (a zero column keeps norm 1).
/// `None` when `A` is not finite, has fewer rows than columns, or the scaled `A` is rank
/// deficient (singular-value ratio below `1e-13`).
struct ScaledSvd {
    scale: Vec<f64>,
    u: DMatrix<f64>,
    v_t: DMatrix<f64>,
    singular: DVector<f64>,
}

fn scaled_svd(a: &DMatrix<f64>) -> Option<ScaledSvd> {
    let np = a.ncols();
    if np == 0 || a.nrows() < np || a.iter().any(|x| !x.is_finite()) {
        return None;
    }
    let scale: Vec<f64> = a
        .column_iter()
        .map(|c| {
            let s = c.norm();
            if s > 0.0 {
                s
            } else {
                1.0
            }
        })
        .collect();
    let mut scaled = a.clone();
    for (mut c, s) in scaled.column_iter_mut().zip(&scale) {
        c.scale_mut(1.0 / s);
    }
    let svd = scaled.svd(true, true);
    let smax = svd.singular_values.max();
    let smin = svd.singular_values.min();
    if smin.is_nan() || smin <= smax * 1e-13 {
        return None;
    }
    Some(ScaledSvd {
        scale,
        u: svd.u?,
        v_t: svd.v_t?,
        singular: svd.singular_values,
    })
}

/// Least squares `min |A x - b|` by SVD of the column-scaled `A` (never forming `A^T A`,
/// which squares the condition number): the solution and `(A^T A)^{-1}`. `None` when the
/// scaled `A` is rank deficient (singular-value ratio below `1e-13`) or not finite.
pub(crate) fn lstsq(a: &DMatrix<f64>, b: &DVector<f64>) -> Option<(DVector<f64>, DMatrix<f64>)> {
    if b.iter().any(|x| !x.is_finite()) {
        return None;
    }
    let ScaledSvd {
        scale,
        u,
        v_t,
        singular,
    } = scaled_svd(a)?;
    let np = a.ncols();
    let utb = u.transpose() * b;
    let mut x = DVector::zeros(np);
    let mut cov = DMatrix::zeros(np, np);
    for k in 0..np {
        let vk = v_t.row(k).transpose();
        let s = singular[k];
        x += &vk * (utb[k] / s);
        cov += &vk * vk.transpose() / (s * s);
    }
    for (r, sr) in scale.iter().enumerate() {
        x[r] /= sr;
        for (c, sc) in scale.iter().enumerate() {
            cov[(r, c)] /= sr * sc;
        }
    }
    Some((x, cov))
}

/// The pseudo-inverse `A^+` (`np x n`) of a full-rank `A`, from the same column-scaled SVD as
/// [`lstsq`]: `lstsq(a, b).0 == pseudo_inverse(a) * b` up to rounding. `None` as for [`lstsq`].
pub(crate) fn pseudo_inverse(a: &DMatrix<f64>) -> Option<DMatrix<f64>> {
    let ScaledSvd {
        scale,
        u,
        v_t,
        singular,
    } = scaled_svd(a)?;
    // A = U S V^T diag(scale)  =>  A^+ = diag(1/scale) V S^-1 U^T.
    let mut v_s = v_t.transpose();
    for (k, mut c) in v_s.column_iter_mut().enumerate() {
        c.scale_mut(1.0 / singular[k]);
    }
    let mut pinv = v_s * u.transpose();
    for (r, sr) in scale.iter().enumerate() {
        pinv.row_mut(r).scale_mut(1.0 / sr);
    }
    Some(pinv)
}

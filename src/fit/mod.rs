//! Least-squares fitting: problems separate from solvers (methods.md §2).
//!
//! A [`Model`] states its parameters, its values at the data points and its analytic
//! Jacobian; it knows nothing of covariances or priors. [`Weights`] whiten residuals with the
//! Cholesky factor of the inverse covariance; Gaussian [`Prior`]s enter as extra residuals
//! `(x_k - prior_k) / width_k`. Non-linear problems go to Levenberg–Marquardt
//! (`levenberg-marquardt` crate); linear ones are solved in closed form. Every fit returns a
//! [`FitReport`] — converged or why not — instead of failing the whole run.
//!
//! INTERFACE SKETCH (to be completed by the fit work; names may be refined):
//! - `Model` trait: `n_params`, `n_points`, `eval`, `jacobian`.
//! - `Weights::from_covariance(cov) -> Result<Weights>` (reports singular / ill-conditioned).
//! - `nonlinear::fit(model, y, weights, priors, start, settings) -> FitReport`.
//! - `linear::fit(design, y, weights, priors) -> FitReport` (closed form).

use nalgebra::DMatrix;

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
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Prior {
    /// Prior mean.
    pub mean: f64,
    /// Prior width (one standard deviation); must be positive.
    pub width: f64,
}

/// The outcome of one fit.
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct FitReport {
    /// Best-fit parameters.
    pub params: Vec<f64>,
    /// Total chi-square including prior terms.
    pub chi2: f64,
    /// Degrees of freedom: data points minus parameters (priors do not add dof).
    pub dof: i64,
    /// p-value from the chi-square distribution with `dof` degrees of freedom.
    pub p_value: f64,
    /// Whether the solver reported convergence.
    pub converged: bool,
    /// Iterations (function evaluations for LM), 0 for closed forms.
    pub iterations: usize,
    /// Human-readable reason when not converged, empty otherwise.
    pub message: String,
}

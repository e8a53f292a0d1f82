//! First-order response of a least-squares minimum to its data, for starting the fits of many
//! resamples of the same problem close to their own minima (common practice: the linear
//! propagation of a data change through the normal equations).
//!
//! At the minimum `x*` of `|W (f(x) - y)|^2 + |D (x - mu)|^2` the gradient vanishes. For data
//! `y'` weighted by `W'` the first Gauss–Newton step from `x*` is `dx = C g`, with
//! `g = (W' J)^T W' (y' - f(x*)) - (W J)^T W (y - f(x*))` (the gradient change; the prior's
//! part cancels), `J` the model's Jacobian at `x*` and `C = ((W J)^T W J + D^T D)^{-1}` the
//! fit's parameter covariance ([`super::FitReport::covariance`]) standing in for the changed
//! data's. That is the step Levenberg–Marquardt would take first from `x*` on the changed data,
//! at the cost of two triangular products instead of a Jacobian evaluation and a
//! factorisation; its error is of second order in the change of data and weights. A fit
//! started at `x* + dx` reaches its minimum in fewer steps; the start changes only where the
//! solver begins, not what it minimises, so the result agrees with the fit started at `x*` to
//! within the solver's tolerances.

use super::{FitReport, Model, Weights};
use nalgebra::{DMatrix, DVector};

/// Largest predicted move of a parameter, in units of its error, that [`Response::start`]
/// accepts; a larger one (a data change far outside the linear regime, or a badly determined
/// parameter) starts at the minimum itself, as without a prediction.
const MAX_MOVE_IN_ERRORS: f64 = 3.0;

/// The linear response of one fit's minimum to its data and weights.
#[derive(Clone, Debug)]
pub struct Response {
    /// The minimum `x*`.
    minimum: Vec<f64>,
    /// The model at `x*`.
    values: Vec<f64>,
    /// The model's Jacobian at `x*` (not whitened).
    jacobian: DMatrix<f64>,
    /// The parameter covariance `C` at `x*`.
    covariance: DMatrix<f64>,
    /// The gradient term of the fitted data, `(W J)^T W (y - f(x*))`.
    gradient: DVector<f64>,
    /// Parameter errors `sqrt(C_kk)`.
    errors: Vec<f64>,
}

impl Response {
    /// The response at the minimum in `report` of `model` fitted to `y` with weights `w`.
    /// `None` when the fit did not converge, has no parameter covariance, or any of it is not
    /// finite.
    pub fn at_minimum(
        model: &dyn Model,
        y: &[f64],
        w: &Weights,
        report: &FitReport,
    ) -> Option<Response> {
        let (n, np) = (model.n_points(), model.n_params());
        let cov = report.covariance.as_ref()?;
        if !report.converged
            || y.len() != n
            || w.len() != n
            || report.params.len() != np
            || cov.shape() != (np, np)
        {
            return None;
        }
        let mut values = vec![0.0; n];
        model.eval(&report.params, &mut values);
        let mut jacobian = DMatrix::zeros(n, np);
        model.jacobian(&report.params, &mut jacobian);
        let errors: Vec<f64> = (0..np).map(|k| cov[(k, k)].sqrt()).collect();
        let mut response = Response {
            minimum: report.params.clone(),
            values,
            jacobian,
            covariance: cov.clone(),
            gradient: DVector::zeros(np),
            errors,
        };
        response.gradient = response.gradient_for(y, w)?;
        Some(response)
    }

    /// `(W J)^T W (y - f(x*))`, `None` when not finite. One buffer, no matrix temporaries:
    /// it runs once per resample.
    fn gradient_for(&self, y: &[f64], w: &Weights) -> Option<DVector<f64>> {
        let n = self.values.len();
        if y.len() != n || w.len() != n {
            return None;
        }
        let mut buffer = vec![0.0; 3 * n];
        let (d, rest) = buffer.split_at_mut(n);
        let (u, v) = rest.split_at_mut(n);
        for ((d, a), f) in d.iter_mut().zip(y).zip(&self.values) {
            *d = a - f;
        }
        w.whiten(d, u);
        w.whiten_transposed(u, v);
        let g = DVector::from_iterator(
            self.jacobian.ncols(),
            self.jacobian
                .column_iter()
                .map(|c| c.iter().zip(v.iter()).map(|(j, v)| j * v).sum::<f64>()),
        );
        g.iter().all(|x| x.is_finite()).then_some(g)
    }

    /// Predicted minimum for data `y` weighted by `w`: `x* + dx` (see the module
    /// documentation), or `x*` itself when the shapes differ, the prediction is not finite, or
    /// it moves a parameter by more than three of its errors.
    pub fn start(&self, y: &[f64], w: &Weights) -> Vec<f64> {
        let Some(g) = self.gradient_for(y, w) else {
            return self.minimum.clone();
        };
        let np = g.len();
        let dx = (0..np).map(|k| {
            (0..np)
                .map(|l| self.covariance[(k, l)] * (g[l] - self.gradient[l]))
                .sum::<f64>()
        });
        let dx: Vec<f64> = dx.collect();
        let usable = dx
            .iter()
            .zip(&self.errors)
            .all(|(d, e)| d.is_finite() && d.abs() <= MAX_MOVE_IN_ERRORS * e);
        if !usable {
            return self.minimum.clone();
        }
        self.minimum.iter().zip(&dx).map(|(x, d)| x + d).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::fit::{nonlinear, FitSettings};

    /// `a e^{-b t}` at `t = 0..n`.
    struct Exp(usize);

    impl Model for Exp {
        fn n_params(&self) -> usize {
            2
        }
        fn n_points(&self) -> usize {
            self.0
        }
        fn eval(&self, p: &[f64], out: &mut [f64]) {
            for (t, o) in out.iter_mut().enumerate() {
                *o = p[0] * (-p[1] * t as f64).exp();
            }
        }
        fn jacobian(&self, p: &[f64], out: &mut DMatrix<f64>) {
            for i in 0..self.0 {
                let e = (-p[1] * i as f64).exp();
                out[(i, 0)] = e;
                out[(i, 1)] = -(i as f64) * p[0] * e;
            }
        }
    }

    #[test]
    fn predicted_start_is_second_order_close_and_the_fit_from_it_agrees() {
        // First-order perturbation theory of the normal equations (module documentation):
        // the error of the prediction shrinks as the square of the data change, and the fit
        // started there reaches the minimum of the fit started at x*.
        let n = 10;
        let model = Exp(n);
        let y: Vec<f64> = (0..n)
            .map(|t| 2.0 * (-0.3 * t as f64).exp() * (1.0 + 0.01 * (1.7 * t as f64).sin()))
            .collect();
        let sigmas: Vec<f64> = y.iter().map(|v| 0.01 * v).collect();
        let w = Weights::diagonal(&sigmas);
        let settings = FitSettings::default();
        let central = nonlinear::fit(&model, &y, &w, &[], &[1.0, 0.5], &settings);
        assert!(central.converged, "{}", central.message);
        let Some(response) = Response::at_minimum(&model, &y, &w, &central) else {
            panic!("no response at a converged minimum")
        };
        let mut misses = Vec::new();
        for h in [1e-2, 1e-3] {
            let y2: Vec<f64> = y
                .iter()
                .enumerate()
                .map(|(t, v)| v * (1.0 + h * (0.9 * t as f64).cos()))
                .collect();
            let w2 = w.rescaled(&vec![1.0 + h; n]);
            let start = response.start(&y2, &w2);
            let from_min = nonlinear::fit(&model, &y2, &w2, &[], &central.params, &settings);
            let from_start = nonlinear::fit(&model, &y2, &w2, &[], &start, &settings);
            assert!(from_min.converged && from_start.converged);
            // The solver stops when chi2 changes by less than 30 machine epsilons relative,
            // which leaves a parameter uncertain by about sqrt(30 eps chi2) ~ 1e-7 errors.
            for k in 0..2 {
                let scale = central.error(k).unwrap_or(f64::NAN);
                approx::assert_abs_diff_eq!(
                    from_start.params[k],
                    from_min.params[k],
                    epsilon = 1e-6 * scale
                );
            }
            misses.push((start[1] - from_min.params[1]).abs());
        }
        // Ten times smaller a change, at least thirty times closer (second order: 100).
        assert!(misses[1] < misses[0] / 30.0, "{misses:?}");
    }
}

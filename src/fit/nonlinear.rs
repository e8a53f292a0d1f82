//! Non-linear least squares by Levenberg–Marquardt (Moré's MINPACK variant, through the
//! `levenberg-marquardt` crate) on whitened residuals plus prior residuals (docs/methods.md §2).
//!
//! The residual vector handed to the solver is `[W (f(x) - y); (x_k - mean_k) / width_k]`, its
//! Jacobian `[W J(x); diag(1 / width_k)]` with `J` the model's analytic Jacobian. Invalid input
//! (wrong lengths, NaN, bad priors or settings) and solver failures come back as a
//! non-converged [`FitReport`] with a message, never as a panic.

use super::{check_priors, lstsq, p_value, FitReport, Model, Prior, Weights};
use levenberg_marquardt::{LeastSquaresProblem, LevenbergMarquardt, MinimizationReport};
use nalgebra::allocator::{Allocator, Reallocator};
use nalgebra::{
    Const, DMatrix, DVector, DefaultAllocator, Dim, DimMax, DimMaximum, DimMin, Dyn, OMatrix,
    OVector, Owned,
};
use std::cell::RefCell;

/// Solver settings (see the `levenberg-marquardt` crate / MINPACK `lmder` for their meaning).
#[derive(
    Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize, schemars::JsonSchema,
)]
#[serde(default, deny_unknown_fields)]
pub struct FitSettings {
    /// Relative reduction of the sum of squares at which to stop.
    pub ftol: f64,
    /// Relative change of the parameters at which to stop.
    pub xtol: f64,
    /// Orthogonality of residuals and Jacobian columns at which to stop.
    pub gtol: f64,
    /// At most `patience * (n_params + 1)` residual evaluations.
    pub patience: usize,
    /// Initial step bound factor (MINPACK `factor`).
    pub stepbound: f64,
}

impl Default for FitSettings {
    /// Tolerances of 30 machine epsilons (the crate's defaults) and a patience of 400, tuned
    /// on the NIST StRD problems in `tests/fit.rs`.
    fn default() -> Self {
        FitSettings {
            ftol: 30.0 * f64::EPSILON,
            xtol: 30.0 * f64::EPSILON,
            gtol: 30.0 * f64::EPSILON,
            patience: 400,
            stepbound: 100.0,
        }
    }
}

impl FitSettings {
    fn check(&self) -> Result<(), String> {
        let ok = |x: f64| x.is_finite() && x >= 0.0;
        if !ok(self.ftol) || !ok(self.xtol) || !ok(self.gtol) {
            return Err(format!(
                "fit tolerances must be finite and non-negative (ftol {}, xtol {}, gtol {})",
                self.ftol, self.xtol, self.gtol
            ));
        }
        if self.patience == 0 || !(self.stepbound > 0.0 && self.stepbound.is_finite()) {
            return Err(format!(
                "patience must be positive and stepbound positive (got {}, {})",
                self.patience, self.stepbound
            ));
        }
        Ok(())
    }
}

/// One fit as the solver sees it. `M` is the number of residual rows (data points plus
/// priors) and `N` the parameter dimension: compile-time sizes for the common shapes (the
/// solver's vectors and matrices then live on the stack instead of being allocated at every
/// step, and its loops have known trip counts; the arithmetic is the same generic code, so the
/// results are the same bits as with `Dyn`), `Dyn` otherwise.
struct Problem<'a, M: Dim, N: Dim>
where
    DefaultAllocator: Allocator<N>,
{
    model: &'a dyn Model,
    y: &'a [f64],
    weights: &'a Weights,
    priors: Vec<(usize, Prior)>,
    x: OVector<f64, N>,
    rows: M,
    /// Model values, then residuals before whitening (one buffer per fit, not per step).
    values: RefCell<Vec<f64>>,
    /// The model's Jacobian before whitening.
    model_jacobian: RefCell<DMatrix<f64>>,
}

impl<M: Dim, N: Dim> LeastSquaresProblem<f64, M, N> for Problem<'_, M, N>
where
    DefaultAllocator: Allocator<N> + Allocator<M> + Allocator<M, N>,
{
    type ResidualStorage = Owned<f64, M>;
    type JacobianStorage = Owned<f64, M, N>;
    type ParameterStorage = Owned<f64, N>;

    fn set_params(&mut self, x: &OVector<f64, N>) {
        self.x.copy_from(x);
    }

    fn params(&self) -> OVector<f64, N> {
        self.x.clone()
    }

    fn residuals(&self) -> Option<OVector<f64, M>> {
        let n = self.y.len();
        let mut f = self.values.borrow_mut();
        f.clear();
        f.resize(n, 0.0);
        self.model.eval(self.x.as_slice(), &mut f);
        for (fi, yi) in f.iter_mut().zip(self.y) {
            *fi -= yi;
        }
        let mut r = OVector::<f64, M>::zeros_generic(self.rows, Const::<1>);
        self.weights.whiten(&f, &mut r.as_mut_slice()[..n]);
        for (k, (j, p)) in self.priors.iter().enumerate() {
            r[n + k] = (self.x[*j] - p.mean) / p.width;
        }
        r.as_slice().iter().all(|v| v.is_finite()).then_some(r)
    }

    fn jacobian(&self) -> Option<OMatrix<f64, M, N>> {
        let n = self.y.len();
        let np = self.x.shape_generic().0;
        let mut jm = self.model_jacobian.borrow_mut();
        jm.fill(0.0);
        self.model.jacobian(self.x.as_slice(), &mut jm);
        let mut j = OMatrix::<f64, M, N>::zeros_generic(self.rows, np);
        self.weights
            .whiten_columns(jm.as_slice(), n, j.as_mut_slice(), self.rows.value());
        for (k, (col, p)) in self.priors.iter().enumerate() {
            j[(n + k, *col)] = 1.0 / p.width;
        }
        j.as_slice().iter().all(|v| v.is_finite()).then_some(j)
    }
}

fn failed(start: &[f64], dof: i64, message: String) -> FitReport {
    FitReport {
        params: start.to_vec(),
        chi2: f64::NAN,
        dof,
        p_value: f64::NAN,
        converged: false,
        iterations: 0,
        message,
        covariance: None,
    }
}

/// Fit `model` to `y` with weights `w`, optional Gaussian priors (empty slice or one entry per
/// parameter) and starting values `start`. Always returns a report; `converged == false`
/// with a `message` says why a fit failed.
pub fn fit(
    model: &dyn Model,
    y: &[f64],
    w: &Weights,
    priors: &[Option<Prior>],
    start: &[f64],
    settings: &FitSettings,
) -> FitReport {
    solve(model, y, w, priors, start, settings, true)
}

/// [`fit`] without the parameter covariance (`covariance` is always `None`): for the fits to
/// resamples, whose errors come from the spread over resamples. Saves the SVD of the
/// Jacobian at the minimum; parameters, chi-square and convergence are those of [`fit`].
pub fn fit_without_covariance(
    model: &dyn Model,
    y: &[f64],
    w: &Weights,
    priors: &[Option<Prior>],
    start: &[f64],
    settings: &FitSettings,
) -> FitReport {
    solve(model, y, w, priors, start, settings, false)
}

fn solve(
    model: &dyn Model,
    y: &[f64],
    w: &Weights,
    priors: &[Option<Prior>],
    start: &[f64],
    settings: &FitSettings,
    with_covariance: bool,
) -> FitReport {
    let np = model.n_params();
    let n = model.n_points();
    let dof = n as i64 - np as i64;
    if y.len() != n || w.len() != n || start.len() != np {
        return failed(
            start,
            dof,
            format!(
                "shape mismatch: model has {n} points and {np} parameters, got {} data, {} weights, {} starting values",
                y.len(),
                w.len(),
                start.len()
            ),
        );
    }
    if let Err(m) = check_priors(priors, np).and_then(|_| settings.check()) {
        return failed(start, dof, m);
    }
    if let Some(i) = y.iter().position(|v| !v.is_finite()) {
        return failed(start, dof, format!("data point {i} is {}", y[i]));
    }
    if start.iter().any(|v| !v.is_finite()) {
        return failed(start, dof, "starting values are not finite".into());
    }
    let priors: Vec<(usize, Prior)> = priors
        .iter()
        .enumerate()
        .filter_map(|(k, p)| p.map(|p| (k, p)))
        .collect();
    if n + priors.len() < np {
        return failed(
            start,
            dof,
            format!(
                "{n} data points and {} priors cannot determine {np} parameters",
                priors.len()
            ),
        );
    }
    let lm = LevenbergMarquardt::new()
        .with_ftol(settings.ftol)
        .with_xtol(settings.xtol)
        .with_gtol(settings.gtol)
        .with_patience(settings.patience)
        .with_stepbound(settings.stepbound);
    let parts = Parts {
        model,
        y,
        weights: w,
        priors,
        start,
    };
    let (params, residuals, jacobian, report) = dispatch(parts, &lm, with_covariance);
    let (chi2, covariance) = match (residuals, jacobian) {
        (Some(r), Some(j)) => (r.norm_squared(), lstsq(&j, &r).map(|(_, cov)| cov)),
        (Some(_), None) if with_covariance => (f64::NAN, None),
        (Some(r), None) => (r.norm_squared(), None),
        (None, _) => (f64::NAN, None),
    };
    let converged = report.termination.was_successful() && chi2.is_finite();
    let message = if converged {
        String::new()
    } else {
        format!("Levenberg–Marquardt stopped: {:?}", report.termination)
    };
    FitReport {
        params,
        chi2,
        dof,
        p_value: p_value(chi2, dof),
        converged,
        iterations: report.number_of_evaluations,
        message,
        covariance,
    }
}

/// The checked inputs of one fit.
struct Parts<'a> {
    model: &'a dyn Model,
    y: &'a [f64],
    weights: &'a Weights,
    priors: Vec<(usize, Prior)>,
    start: &'a [f64],
}

/// Result of [`minimise`]: parameters, residuals at the minimum, the Jacobian there (only
/// when asked for the covariance) and the solver's report.
type Minimum = (
    Vec<f64>,
    Option<DVector<f64>>,
    Option<DMatrix<f64>>,
    MinimizationReport<f64>,
);

/// Run the solver with compile-time sizes where the shape is a common one (see [`Problem`]):
/// 2, 4 or 6 parameters (one to three states of a two-point fit, a dipole) on up to 16
/// residual rows (data points plus priors); `Dyn` rows or parameters otherwise.
fn dispatch(parts: Parts, lm: &LevenbergMarquardt<f64>, with_covariance: bool) -> Minimum {
    let np = parts.start.len();
    let m = parts.y.len() + parts.priors.len();
    macro_rules! rows {
        ($n:literal: $($r:literal)*) => {
            match m {
                $($r => minimise(parts, Const::<$r>, Const::<$n>, lm, with_covariance),)*
                _ => minimise(parts, Dyn(m), Const::<$n>, lm, with_covariance),
            }
        };
    }
    match np {
        2 => rows!(2: 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16),
        4 => rows!(4: 4 5 6 7 8 9 10 11 12 13 14 15 16),
        6 => rows!(6: 6 7 8 9 10 11 12 13 14 15 16),
        _ => minimise(parts, Dyn(m), Dyn(np), lm, with_covariance),
    }
}

/// Run the solver with `rows` residual rows and parameter dimension `np` (see [`Problem`]).
fn minimise<M, N: Dim>(
    parts: Parts,
    rows: M,
    np: N,
    lm: &LevenbergMarquardt<f64>,
    with_covariance: bool,
) -> Minimum
where
    M: DimMin<N> + DimMax<N>,
    DefaultAllocator:
        Allocator<N> + Allocator<M> + Allocator<M, N> + Reallocator<f64, M, N, DimMaximum<M, N>, N>,
{
    let n = parts.y.len();
    let problem = Problem {
        model: parts.model,
        y: parts.y,
        weights: parts.weights,
        priors: parts.priors,
        x: OVector::<f64, N>::from_iterator_generic(np, Const::<1>, parts.start.iter().copied()),
        rows,
        values: RefCell::new(Vec::with_capacity(n)),
        model_jacobian: RefCell::new(DMatrix::zeros(n, np.value())),
    };
    let (problem, report) = lm.minimize(problem);
    let params: Vec<f64> = problem.x.iter().copied().collect();
    let residuals = problem
        .residuals()
        .map(|r| DVector::from_column_slice(r.as_slice()));
    let jacobian = match residuals {
        Some(_) if with_covariance => problem
            .jacobian()
            .map(|j| DMatrix::from_column_slice(j.nrows(), j.ncols(), j.as_slice())),
        _ => None,
    };
    (params, residuals, jacobian, report)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// `a e^{-b t} + c e^{-d t}` at `t = 0..n`.
    struct TwoExp(usize);

    impl Model for TwoExp {
        fn n_params(&self) -> usize {
            4
        }
        fn n_points(&self) -> usize {
            self.0
        }
        fn eval(&self, p: &[f64], out: &mut [f64]) {
            for (t, o) in out.iter_mut().enumerate() {
                let t = t as f64;
                *o = p[0] * (-p[1] * t).exp() + p[2] * (-p[3] * t).exp();
            }
        }
        fn jacobian(&self, p: &[f64], out: &mut DMatrix<f64>) {
            for i in 0..self.0 {
                let t = i as f64;
                let (e1, e2) = ((-p[1] * t).exp(), (-p[3] * t).exp());
                out[(i, 0)] = e1;
                out[(i, 1)] = -t * p[0] * e1;
                out[(i, 2)] = e2;
                out[(i, 3)] = -t * p[2] * e2;
            }
        }
    }

    #[test]
    fn compile_time_sizes_give_the_same_bits_as_dynamic_ones() {
        // The crate's generic code does the same operations for Const and Dyn shapes, so the
        // fixed-size dispatch must not move a bit (from the design of `dispatch`).
        let n = 11;
        let model = TwoExp(n);
        let y: Vec<f64> = (0..n)
            .map(|t| {
                let t = t as f64;
                1.3 * (-0.4 * t).exp() + 0.7 * (-1.1 * t).exp() + 1e-4 * (2.1 * t).sin()
            })
            .collect();
        let cov = DMatrix::from_fn(n, n, |i, j| {
            let d = (i as f64 - j as f64).abs();
            1e-6 * y[i] * y[j] * 0.5f64.powf(d) + if i == j { 1e-10 } else { 0.0 }
        });
        let Ok(w) = Weights::from_covariance(&cov) else {
            panic!("test covariance refused")
        };
        let lm = LevenbergMarquardt::new();
        let priors = vec![(3, Prior::new(1.0, 0.5))];
        let parts = || Parts {
            model: &model,
            y: &y,
            weights: &w,
            priors: priors.clone(),
            start: &[1.0, 0.3, 0.5, 1.0],
        };
        let (p_fixed, r_fixed, j_fixed, rep_fixed) =
            minimise(parts(), Const::<12>, Const::<4>, &lm, true);
        let (p_dyn, r_dyn, j_dyn, rep_dyn) = minimise(parts(), Dyn(12), Dyn(4), &lm, true);
        assert!(rep_fixed.termination.was_successful());
        assert_eq!(
            rep_fixed.number_of_evaluations,
            rep_dyn.number_of_evaluations
        );
        let bits = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&p_fixed), bits(&p_dyn));
        let (Some(r_fixed), Some(r_dyn)) = (r_fixed, r_dyn) else {
            panic!("no residuals")
        };
        assert_eq!(bits(r_fixed.as_slice()), bits(r_dyn.as_slice()));
        let (Some(j_fixed), Some(j_dyn)) = (j_fixed, j_dyn) else {
            panic!("no Jacobian")
        };
        assert_eq!(bits(j_fixed.as_slice()), bits(j_dyn.as_slice()));
        // And `fit` (which dispatches to the fixed sizes) reports that minimum.
        let report = fit(
            &model,
            &y,
            &w,
            &[None, None, None, Some(Prior::new(1.0, 0.5))],
            &[1.0, 0.3, 0.5, 1.0],
            &FitSettings::default(),
        );
        assert!(report.converged, "{}", report.message);
        assert_eq!(bits(&report.params), bits(&p_dyn));
    }
}

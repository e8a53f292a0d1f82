//! Linear least squares in closed form (docs/methods.md §2 and §4: correlated constant and line
//! fits). The whitened system `[W A; P] x = [W y; p]` (prior rows `P = diag(1/width)`,
//! `p = mean/width`) is solved by singular value decomposition, never iteratively; the
//! parameter covariance is `V S^{-2} V^T`. A rank-deficient design is an error.

use super::{check_priors, lstsq, p_value, pseudo_inverse, Prior, Weights};
use crate::error::{Error, Result};
use nalgebra::{DMatrix, DVector};

/// A closed-form linear fit.
#[derive(Clone, Debug, PartialEq)]
pub struct LinearFit {
    /// Best-fit parameters.
    pub params: Vec<f64>,
    /// Parameter covariance.
    pub covariance: DMatrix<f64>,
    /// Total chi-square including prior terms.
    pub chi2: f64,
    /// Data points minus parameters.
    pub dof: i64,
    /// p-value of `chi2` for `dof` (NaN for `dof <= 0`).
    pub p_value: f64,
}

impl LinearFit {
    /// Standard error of parameter `k`.
    pub fn error(&self, k: usize) -> f64 {
        self.covariance[(k, k)].sqrt()
    }
}

/// Fit `y ~ design x` (design: one row per point, one column per parameter).
pub fn fit(
    design: &DMatrix<f64>,
    y: &[f64],
    w: &Weights,
    priors: &[Option<Prior>],
) -> Result<LinearFit> {
    let n = design.nrows();
    let np = design.ncols();
    if y.len() != n || w.len() != n || np == 0 {
        return Err(Error::analysis(
            "fit",
            format!(
                "linear fit: design is {n}x{np}, {} data, {} weights; expected equal point counts and at least one parameter",
                y.len(),
                w.len()
            ),
        ));
    }
    check_priors(priors, np).map_err(|m| Error::analysis("fit", m))?;
    if let Some(i) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::analysis(
            "fit",
            format!("linear fit: data point {i} is {}", y[i]),
        ));
    }
    let active: Vec<(usize, Prior)> = priors
        .iter()
        .enumerate()
        .filter_map(|(k, p)| p.map(|p| (k, p)))
        .collect();
    let rows = n + active.len();
    if rows < np {
        return Err(Error::analysis(
            "fit",
            format!(
                "linear fit: {n} points and {} priors cannot determine {np} parameters",
                active.len()
            ),
        ));
    }
    let mut a = DMatrix::zeros(rows, np);
    a.rows_mut(0, n).copy_from(&w.whiten_matrix(design));
    let mut b = DVector::zeros(rows);
    w.whiten(y, &mut b.as_mut_slice()[..n]);
    for (k, (j, p)) in active.iter().enumerate() {
        a[(n + k, *j)] = 1.0 / p.width;
        b[n + k] = p.mean / p.width;
    }
    let Some((x, covariance)) = lstsq(&a, &b) else {
        return Err(Error::analysis(
            "fit",
            "linear fit: design is rank deficient or not finite; parameters are not determined by the data",
        ));
    };
    let chi2 = (&a * &x - &b).norm_squared();
    let params: Vec<f64> = x.iter().copied().collect();
    let dof = n as i64 - np as i64;
    Ok(LinearFit {
        params,
        covariance,
        chi2,
        dof,
        p_value: p_value(chi2, dof),
    })
}

/// A linear fit whose design matrix and weights are the same for many data vectors (the
/// resamples of a plateau or summation fit): the whitened design `W A` is factorised once and
/// every data vector is solved by one product with the projector `P = (W A)^+ W`, the same
/// solution as [`fit`] up to rounding (the column-scaled SVD of `fit::lstsq`).
#[derive(Clone, Debug)]
pub struct FixedDesign {
    /// `P`, one row per parameter, one column per point.
    projector: DMatrix<f64>,
}

impl FixedDesign {
    /// Factorise `design` (one row per point) with weights `w`. Errors as [`fit`] does for a
    /// rank-deficient or non-finite design or mismatched sizes.
    pub fn new(design: &DMatrix<f64>, w: &Weights) -> Result<FixedDesign> {
        let (n, np) = design.shape();
        if w.len() != n || np == 0 || n < np {
            return Err(Error::analysis(
                "fit",
                format!(
                    "linear fit: design is {n}x{np} with {} weights; expected equal point counts and at least as many points as parameters",
                    w.len()
                ),
            ));
        }
        let pinv = pseudo_inverse(&w.whiten_matrix(design)).ok_or_else(|| {
            Error::analysis(
                "fit",
                "linear fit: design is rank deficient or not finite; parameters are not determined by the data",
            )
        })?;
        // P = A_w^+ W: row j of P is W^T applied to row j of A_w^+.
        let projector = pinv * w.matrix();
        Ok(FixedDesign { projector })
    }

    /// Number of fitted parameters.
    pub fn n_params(&self) -> usize {
        self.projector.nrows()
    }

    /// The parameters for many data vectors at once. `points[i]` holds the values of point
    /// `i` in every data vector (all of one length `m`, e.g. the resamples); the result holds,
    /// per parameter, its `m` values. The sum over points runs in point order, so the result
    /// does not depend on how the caller splits work. A non-finite value is an error naming
    /// the point.
    pub fn solve_many(&self, points: &[&[f64]]) -> Result<Vec<Vec<f64>>> {
        let n = self.projector.ncols();
        let m = points.first().map_or(0, |p| p.len());
        if points.len() != n || points.iter().any(|p| p.len() != m) {
            return Err(Error::analysis(
                "fit",
                format!(
                    "linear fit: {} data points (of unequal lengths?) for a design of {n} points",
                    points.len()
                ),
            ));
        }
        for (i, p) in points.iter().enumerate() {
            if let Some(v) = p.iter().find(|v| !v.is_finite()) {
                return Err(Error::analysis(
                    "fit",
                    format!("linear fit: data point {i} is {v}"),
                ));
            }
        }
        let mut out = vec![vec![0.0; m]; self.n_params()];
        for (j, o) in out.iter_mut().enumerate() {
            for (i, p) in points.iter().enumerate() {
                let c = self.projector[(j, i)];
                for (o, y) in o.iter_mut().zip(p.iter()) {
                    *o += c * y;
                }
            }
        }
        Ok(out)
    }
}

/// Correlated constant fit `y_i = c` (the plateau, docs/methods.md §4).
pub fn constant(y: &[f64], w: &Weights) -> Result<LinearFit> {
    fit(&DMatrix::from_element(y.len(), 1, 1.0), y, w, &[])
}

/// Correlated straight line `y_i = a + b x_i`; parameters `[a, b]`.
pub fn line(x: &[f64], y: &[f64], w: &Weights) -> Result<LinearFit> {
    if x.len() != y.len() {
        return Err(Error::analysis(
            "fit",
            format!("line fit: {} abscissae for {} data", x.len(), y.len()),
        ));
    }
    let design = DMatrix::from_fn(x.len(), 2, |i, j| if j == 0 { 1.0 } else { x[i] });
    fit(&design, y, w, &[])
}

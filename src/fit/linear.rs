//! Linear least squares in closed form (docs/methods.md §2 and §4: correlated constant and line
//! fits). The whitened system `[W A; P] x = [W y; p]` (prior rows `P = diag(1/width)`,
//! `p = mean/width`) is solved by singular value decomposition, never iteratively; the
//! parameter covariance is `V S^{-2} V^T`. A rank-deficient design is an error.

use super::{check_priors, lstsq, p_value, pseudo_inverse, Prior, Weights};
use crate::error::{Error, Result};
use nalgebra::{DMatrix, DVector};

pub use super::normal_equations::{solve_fixed_uncorrelated, Uncorrelated};

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

/// Buffers for solving many linear fits whose design changes from one data vector to the next
/// (the fixed-gap two-state fit, whose design depends on the resampled gaps) without
/// allocating per vector: each vector is solved by Householder QR of the column-scaled,
/// whitened design (Golub & Van Loan, "Matrix Computations", 4th ed., §5.2 and §5.3.3). The
/// solution equals [`fit`]'s (column-scaled SVD) up to rounding of order the condition number
/// times the machine epsilon; both are backward stable and neither forms `A^T A`.
#[derive(Clone, Debug)]
pub struct Workspace {
    /// Whitened, column-scaled design, overwritten by its QR factorisation.
    a: DMatrix<f64>,
    /// Whitened data, overwritten by `Q^T W y`.
    b: Vec<f64>,
    /// Column norms of the whitened design.
    scale: Vec<f64>,
}

impl Workspace {
    /// Buffers for designs of `n` points and `np` parameters.
    pub fn new(n: usize, np: usize) -> Workspace {
        Workspace {
            a: DMatrix::zeros(n, np),
            b: vec![0.0; n],
            scale: vec![1.0; np],
        }
    }

    /// Solve `min |W (design x - y)|` into `out` (one value per parameter). Errors as [`fit`]
    /// does for mismatched sizes, a non-finite data point, or a rank-deficient or non-finite
    /// design (the smallest diagonal of `R` below `1e-13` times the largest, the column-scaled
    /// analogue of [`fit`]'s singular-value ratio).
    pub fn solve(
        &mut self,
        design: &DMatrix<f64>,
        y: &[f64],
        w: &Weights,
        out: &mut [f64],
    ) -> Result<()> {
        let (n, np) = self.a.shape();
        if design.shape() != (n, np) || y.len() != n || w.len() != n || out.len() != np {
            return Err(Error::analysis(
                "fit",
                format!(
                    "linear fit: design is {}x{}, {} data, {} weights, {} outputs; expected a {n}x{np} design",
                    design.nrows(),
                    design.ncols(),
                    y.len(),
                    w.len(),
                    out.len()
                ),
            ));
        }
        if let Some(i) = y.iter().position(|v| !v.is_finite()) {
            return Err(Error::analysis(
                "fit",
                format!("linear fit: data point {i} is {}", y[i]),
            ));
        }
        let deficient = || {
            Error::analysis(
                "fit",
                "linear fit: design is rank deficient or not finite; parameters are not determined by the data",
            )
        };
        if np == 0 || n < np {
            return Err(deficient());
        }
        w.whiten_into(design, &mut self.a);
        w.whiten(y, &mut self.b);
        let a = self.a.as_mut_slice();
        for (j, s) in self.scale.iter_mut().enumerate() {
            let col = &mut a[j * n..(j + 1) * n];
            let norm = col.iter().map(|x| x * x).sum::<f64>().sqrt();
            if !norm.is_finite() {
                return Err(deficient());
            }
            *s = if norm > 0.0 { norm } else { 1.0 };
            let inv = 1.0 / *s;
            col.iter_mut().for_each(|x| *x *= inv);
        }
        // Householder QR, the reflectors applied to the remaining columns and to b at once.
        let mut rmax = 0.0f64;
        let mut rmin = f64::INFINITY;
        for j in 0..np {
            let (done, rest) = a.split_at_mut((j + 1) * n);
            let v = &mut done[j * n + j..];
            let norm = v.iter().map(|x| x * x).sum::<f64>().sqrt();
            let alpha = if v[0] > 0.0 { -norm } else { norm };
            let (rabs, v0) = (alpha.abs(), v[0] - alpha);
            rmax = rmax.max(rabs);
            rmin = rmin.min(rabs);
            if rabs == 0.0 {
                return Err(deficient());
            }
            v[0] = v0;
            // H = I - 2 v v^T / (v^T v), v^T v = 2 norm (norm + |a_jj|) = -2 alpha v0.
            let vtv = -alpha * v0;
            for c in rest.chunks_mut(n) {
                let c = &mut c[j..];
                let f = v.iter().zip(c.iter()).map(|(p, q)| p * q).sum::<f64>() / vtv;
                c.iter_mut().zip(v.iter()).for_each(|(q, p)| *q -= f * p);
            }
            let bj = &mut self.b[j..];
            let f = v.iter().zip(bj.iter()).map(|(p, q)| p * q).sum::<f64>() / vtv;
            bj.iter_mut().zip(v.iter()).for_each(|(q, p)| *q -= f * p);
            v[0] = alpha;
        }
        // A NaN ratio counts as deficient too.
        if rmin.partial_cmp(&(rmax * 1e-13)) != Some(std::cmp::Ordering::Greater) {
            return Err(deficient());
        }
        // Back substitution R x = (Q^T b)[..np], then undo the column scaling.
        for j in (0..np).rev() {
            let mut v = self.b[j];
            for (k, o) in out.iter().enumerate().skip(j + 1) {
                v -= a[k * n + j] * o;
            }
            out[j] = v / a[j * n + j];
        }
        for (o, s) in out.iter_mut().zip(&self.scale) {
            *o /= s;
        }
        Ok(())
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

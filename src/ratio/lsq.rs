//! Correlated linear least squares on resampled data, shared by the plateau, summation and
//! fixed-gap two-state fits: covariance frozen from the resamples (common practice,
//! methods.md §2), then per resample the closed-form normal equations
//! `beta = (X^T W X)^{-1} X^T W y`, `W = Cov^{-1}`.

use super::{FitQuality, ReIm, STAGE};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::{DMatrix, DVector};
use statrs::distribution::{ChiSquared, ContinuousCDF};

/// The inverse covariance of `points`, estimated from their resamples (diagonal only when
/// `diagonal`). A singular or non-positive covariance is an error naming `what`.
pub(crate) fn weights(points: &[Resampled], diagonal: bool, what: &str) -> Result<DMatrix<f64>> {
    let n = points.len();
    let mut cov = DMatrix::zeros(n, n);
    for i in 0..n {
        for j in 0..=i {
            if diagonal && i != j {
                continue;
            }
            let c = points[i].covariance(&points[j]);
            cov[(i, j)] = c;
            cov[(j, i)] = c;
        }
    }
    let singular = || {
        Error::analysis(
            STAGE,
            format!(
                "{what}: the covariance of the {n} fitted points is singular or not positive \
                 (too few resamples for the number of points, or exact data); use fewer points \
                 or diagonal weights"
            ),
        )
    };
    if !cov.iter().all(|x| x.is_finite()) {
        return Err(singular());
    }
    let chol = nalgebra::Cholesky::new(cov).ok_or_else(singular)?;
    let w = chol.inverse();
    if w.iter().all(|x| x.is_finite()) {
        Ok(w)
    } else {
        Err(singular())
    }
}

/// Solve one weighted linear problem; returns the parameters and the chi-square.
pub(crate) fn solve(
    design: &DMatrix<f64>,
    y: &DVector<f64>,
    w: &DMatrix<f64>,
) -> Option<(DVector<f64>, f64)> {
    let xtw = design.transpose() * w;
    let normal = &xtw * design;
    let rhs = &xtw * y;
    let beta = normal.cholesky()?.solve(&rhs);
    let r = y - design * &beta;
    let chi2 = (r.transpose() * w * &r)[(0, 0)];
    beta.iter().all(|b| b.is_finite()).then_some((beta, chi2))
}

/// p-value of `chi2` with `dof` degrees of freedom (1 when `dof <= 0`).
pub(crate) fn p_value(chi2: f64, dof: i64) -> f64 {
    if dof <= 0 {
        return 1.0;
    }
    match ChiSquared::new(dof as f64) {
        Ok(d) => d.sf(chi2.max(0.0)),
        Err(_) => 1.0,
    }
}

/// Fit `points` with a design matrix that may change per resample (`design(None)` for the
/// central value, `design(Some(k))` for sample `k`), weights `w` frozen. Returns one
/// resampled value per parameter and the quality of the central fit.
pub(crate) fn fit_resampled(
    points: &[Resampled],
    design: impl Fn(Option<usize>) -> DMatrix<f64>,
    w: &DMatrix<f64>,
    what: &str,
) -> Result<(Vec<Resampled>, FitQuality)> {
    let n = points.len();
    let first = design(None);
    let k = first.ncols();
    if n < k {
        return Err(Error::analysis(
            STAGE,
            format!("{what}: {n} points for {k} parameters; need at least {k}"),
        ));
    }
    let fail = || {
        Error::analysis(
            STAGE,
            format!("{what}: the normal equations are singular (parameters not determined by the points)"),
        )
    };
    let y0 = DVector::from_iterator(n, points.iter().map(|p| p.central));
    let (beta0, chi2) = solve(&first, &y0, w).ok_or_else(fail)?;
    let n_samples = points.first().map_or(0, Resampled::len);
    let per_sample = (0..n_samples)
        .map(|s| {
            let y = DVector::from_iterator(n, points.iter().map(|p| p.samples[s]));
            solve(&design(Some(s)), &y, w).map(|(beta, _)| beta)
        })
        .collect::<Option<Vec<_>>>()
        .ok_or_else(fail)?;
    let samples = (0..k).map(|j| per_sample.iter().map(|b| b[j]).collect::<Vec<f64>>());
    let scheme = points[0].scheme;
    let params = beta0
        .iter()
        .zip(samples)
        .map(|(&c, s)| Resampled::new(c, s, scheme))
        .collect();
    let dof = n as i64 - k as i64;
    Ok((
        params,
        FitQuality {
            chi2,
            dof,
            p_value: p_value(chi2, dof),
        },
    ))
}

/// Fit the real and the imaginary parts of `points` separately with the same design (see
/// [`fit_resampled`]). A part that is exactly zero on every point and sample (data without an
/// imaginary part, say) gives exactly zero parameters without a fit: its covariance is zero.
pub(crate) fn fit_re_im(
    points: &[&ReIm],
    design: impl Fn(Option<usize>) -> DMatrix<f64>,
    diagonal: bool,
    what: &str,
) -> Result<(Vec<ReIm>, FitQuality, FitQuality)> {
    let part = |values: Vec<Resampled>, name: &str| -> Result<(Vec<Resampled>, FitQuality)> {
        let what = format!("{what} ({name} part)");
        let zero = values
            .iter()
            .all(|v| v.central == 0.0 && v.samples.iter().all(|&x| x == 0.0));
        let k = design(None).ncols();
        if zero && values.len() >= k {
            let dof = values.len() as i64 - k as i64;
            let z = values[0].map(|_| 0.0);
            return Ok((
                vec![z; k],
                FitQuality {
                    chi2: 0.0,
                    dof,
                    p_value: 1.0,
                },
            ));
        }
        let w = weights(&values, diagonal, &what)?;
        fit_resampled(&values, &design, &w, &what)
    };
    let (re, q_re) = part(points.iter().map(|p| p.re.clone()).collect(), "real")?;
    let (im, q_im) = part(points.iter().map(|p| p.im.clone()).collect(), "imaginary")?;
    let params = re
        .into_iter()
        .zip(im)
        .map(|(re, im)| ReIm { re, im })
        .collect();
    Ok((params, q_re, q_im))
}

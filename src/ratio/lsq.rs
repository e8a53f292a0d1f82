//! Correlated linear least squares on resampled data, shared by the plateau, summation and
//! fixed-gap two-state fits: the covariance is estimated once from the resamples
//! ([`crate::resample::covariance`]) and frozen (common practice, docs/methods.md §2), then every
//! resample is fitted in closed form ([`crate::fit::linear`]). A design that is the same for
//! every resample (plateau, summation) is factorised once and applied to all resamples as one
//! product ([`linear::FixedDesign`]); only a design that changes per resample (the fixed-gap
//! two-state fit, whose gaps are resampled) is solved resample by resample, by QR in buffers
//! allocated once per fit ([`linear::Workspace`]).

use super::{FitQuality, ReIm, ReImFit, STAGE};
use crate::fit::{linear, Weights};
use crate::resample::covariance::{estimate_with_bins, CovarianceOptions};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;

/// How the covariance of fitted points is estimated.
#[derive(Clone, Copy, Debug)]
pub(crate) struct CovarianceSetup<'a> {
    /// The user's covariance options.
    pub options: &'a CovarianceOptions,
    /// Number of independent bins the resamples were drawn from.
    pub n_bins: usize,
}

fn wrap(what: &str) -> impl Fn(Error) -> Error + '_ {
    move |e| Error::analysis(STAGE, format!("{what}: {e}"))
}

/// Weights for `points` from their frozen covariance, with the estimator's warnings.
pub(crate) fn weights(
    points: &[Resampled],
    cov: CovarianceSetup<'_>,
    what: &str,
) -> Result<(Weights, Vec<String>)> {
    let est = estimate_with_bins(points, cov.options, cov.n_bins).map_err(wrap(what))?;
    let w = Weights::from_covariance(&est.matrix).map_err(wrap(what))?;
    Ok((w, est.warnings))
}

/// The design matrix of a resampled linear fit.
pub(crate) enum Design<'a> {
    /// One matrix for the central value and every resample: factorised once.
    Fixed(DMatrix<f64>),
    /// A matrix per resample of `params` columns: `fill(None, a)` writes the central value's
    /// into `a`, `fill(Some(k), a)` that of sample `k` (`a` has one row per point).
    PerSample {
        /// Number of parameters (columns).
        params: usize,
        /// Writes the design of one resample into its second argument.
        fill: &'a dyn Fn(Option<usize>, &mut DMatrix<f64>),
    },
}

impl Design<'_> {
    fn n_params(&self) -> usize {
        match self {
            Design::Fixed(a) => a.ncols(),
            Design::PerSample { params, .. } => *params,
        }
    }
}

/// Fit `points` with `design`, weights `w` frozen. Returns one resampled value per parameter
/// and the quality of the central fit.
pub(crate) fn fit_resampled(
    points: &[Resampled],
    design: &Design<'_>,
    w: &Weights,
    what: &str,
) -> Result<(Vec<Resampled>, FitQuality)> {
    let y: Vec<f64> = points.iter().map(|p| p.central).collect();
    let central = match design {
        Design::Fixed(a) => linear::fit(a, &y, w, &[]),
        Design::PerSample { params, fill } => {
            let mut a = DMatrix::zeros(points.len(), *params);
            fill(None, &mut a);
            linear::fit(&a, &y, w, &[])
        }
    }
    .map_err(wrap(what))?;
    let per_param = match design {
        Design::Fixed(a) => {
            let columns: Vec<&[f64]> = points.iter().map(|p| p.samples.as_slice()).collect();
            linear::FixedDesign::new(a, w)
                .and_then(|f| f.solve_many(&columns))
                .map_err(wrap(what))?
        }
        Design::PerSample { params, fill } => {
            // Buffers allocated once per fit; every resample is solved in place.
            let n_samples = points.first().map_or(0, Resampled::len);
            let mut per_param = vec![Vec::with_capacity(n_samples); *params];
            let mut y = vec![0.0; points.len()];
            let mut a = DMatrix::zeros(points.len(), *params);
            let mut x = vec![0.0; *params];
            let mut work = linear::Workspace::new(points.len(), *params);
            for s in 0..n_samples {
                for (y, p) in y.iter_mut().zip(points) {
                    *y = p.samples[s];
                }
                fill(Some(s), &mut a);
                work.solve(&a, &y, w, &mut x).map_err(wrap(what))?;
                for (out, v) in per_param.iter_mut().zip(&x) {
                    out.push(*v);
                }
            }
            per_param
        }
    };
    // safe: the central fit above succeeded, so there is at least one point.
    let scheme = points[0].scheme;
    let params = central
        .params
        .iter()
        .zip(per_param)
        .map(|(&c, samples)| Resampled::new(c, samples, scheme))
        .collect();
    Ok((
        params,
        FitQuality {
            chi2: central.chi2,
            dof: central.dof,
            p_value: central.p_value,
        },
    ))
}

/// Fit the real and the imaginary parts of `points` separately with the same design (see
/// [`fit_resampled`]). A part that is exactly zero on every point and sample (data without an
/// imaginary part, say) gives exactly zero parameters without a fit: its covariance is zero.
/// Returns the parameters and, in a [`ReImFit`], the first of them with the fit qualities and
/// the covariance warnings.
pub(crate) fn fit_re_im(
    points: &[&ReIm],
    design: Design<'_>,
    cov: CovarianceSetup<'_>,
    what: &str,
) -> Result<(Vec<ReIm>, ReImFit)> {
    let mut warnings = Vec::new();
    let mut part = |values: Vec<Resampled>, name: &str| -> Result<(Vec<Resampled>, FitQuality)> {
        let what = format!("{what} ({name} part)");
        let k = design.n_params();
        let n = values.len();
        if n < k {
            return Err(Error::analysis(
                STAGE,
                format!("{what}: {n} points for {k} parameters"),
            ));
        }
        let zero = values
            .iter()
            .all(|v| v.central == 0.0 && v.samples.iter().all(|&x| x == 0.0));
        if zero {
            let dof = n as i64 - k as i64;
            let z = values[0].map(|_| 0.0);
            return Ok((
                vec![z; k],
                FitQuality {
                    chi2: 0.0,
                    dof,
                    p_value: crate::fit::p_value(0.0, dof),
                },
            ));
        }
        let (w, warn) = weights(&values, cov, &what)?;
        warnings.extend(warn.into_iter().map(|m| format!("{what}: {m}")));
        fit_resampled(&values, &design, &w, &what)
    };
    let (re, quality_re) = part(points.iter().map(|p| p.re.clone()).collect(), "real")?;
    let (im, quality_im) = part(points.iter().map(|p| p.im.clone()).collect(), "imaginary")?;
    let params: Vec<ReIm> = re
        .into_iter()
        .zip(im)
        .map(|(re, im)| ReIm { re, im })
        .collect();
    let value = params
        .first()
        .cloned()
        .ok_or_else(|| Error::analysis(STAGE, format!("{what}: the fit has no parameters")))?;
    Ok((
        params,
        ReImFit {
            value,
            quality_re,
            quality_im,
            warnings,
        },
    ))
}

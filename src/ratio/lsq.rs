//! Correlated linear least squares on resampled data, shared by the plateau, summation and
//! fixed-gap two-state fits: the covariance is estimated once from the resamples
//! ([`crate::resample::covariance`]) and its correlations frozen (common practice,
//! docs/methods.md §2), then every resample is fitted in closed form ([`crate::fit::linear`]).
//! In a jackknife run each resample weights its points by its own errors (the variances
//! rescaled by the spread of the jackknife pseudo-values it keeps, as the spectrum stage does
//! with its bins), because weights estimated from few bins vary with the data and frozen ones
//! leave that variation out of the error; every resample is then solved on its own, by the
//! normal equations for uncorrelated weights ([`linear::Uncorrelated`], a fixed design for all
//! resamples at once) and by QR otherwise or where those leave it ([`linear::Workspace`]), in
//! buffers allocated once per fit. Bootstrap samples have no per-bin
//! values to rescale by: their weights stay frozen, and a design that is the same for every
//! resample (plateau, summation) is factorised once and applied to all resamples as one
//! product ([`linear::FixedDesign`]).

use super::{FitQuality, ReIm, ReImFit, STAGE};
use crate::fit::{linear, Weights};
use crate::resample::covariance::{
    diagonal_from_variances, diagonal_variance, estimate_with_bins, CovarianceKind,
    CovarianceOptions,
};
#[cfg(test)]
use crate::resample::ResamplePlan;
use crate::resample::{stable_mean, Part, Resampled, Scheme};
use crate::{Error, Result};
use nalgebra::DMatrix;
use std::sync::OnceLock;

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

/// Per point and jackknife sample, the error of the bins that sample keeps relative to all
/// bins, from the jackknife pseudo-values `x_c + (N-1)(x_c - x_j)` (for a mean they are the
/// bins themselves; for a derived quantity, such as the ratio, its linearised value per bin):
/// [`ResamplePlan::sample_error_scales`] of them. `None` for bootstrap samples (no per-bin
/// values to take them from) and when a scale is not finite.
pub(crate) fn jackknife_sample_scales(points: &[&Resampled]) -> Option<Vec<Vec<f64>>> {
    let n = points.first()?.len();
    let mut pseudo = vec![0.0; n];
    points
        .iter()
        .map(|p| point_scales(p, &mut pseudo).filter(|s| s.len() == n))
        .collect()
}

/// One point's part of [`jackknife_sample_scales`]: `None` for bootstrap samples, fewer than
/// three samples, or a scale that is not finite and positive.
fn point_scales(p: &Resampled, pseudo: &mut Vec<f64>) -> Option<Vec<f64>> {
    if p.scheme != Scheme::Jackknife || p.len() < 3 {
        return None;
    }
    pseudo.resize(p.len(), 0.0);
    let s = pseudo_value_scales(p, pseudo);
    s.iter().all(|v| v.is_finite() && *v > 0.0).then_some(s)
}

/// What the fits of a ratio point keep of it, real and imaginary part, computed when the first
/// fit asks and kept for the channel's other fits of the same point (the plateau at its
/// separation and the two-state fits): its [`jackknife_sample_scales`] and its diagonal
/// variance ([`diagonal_variance`], `None` when the point is not finite). A cache: it takes no
/// part in the point's equality.
#[derive(Clone, Debug, Default)]
pub(crate) struct PointKept {
    re: PartCache,
    im: PartCache,
}

#[derive(Clone, Debug, Default)]
struct PartCache {
    scales: OnceLock<Option<Vec<f64>>>,
    variance: OnceLock<Option<f64>>,
}

impl PartialEq for PointKept {
    fn eq(&self, _: &Self) -> bool {
        true
    }
}

impl PointKept {
    fn part(&self, part: Part) -> &PartCache {
        match part {
            Part::Re => &self.re,
            Part::Im => &self.im,
        }
    }

    fn get(&self, part: Part, value: &ReIm) -> Option<&[f64]> {
        self.part(part)
            .scales
            .get_or_init(|| point_scales(value.part(part), &mut Vec::new()))
            .as_deref()
    }

    /// The diagonal variance of a finite point, `None` for a point that is not finite.
    fn variance(&self, part: Part, value: &ReIm) -> Option<f64> {
        *self.part(part).variance.get_or_init(|| {
            let v = value.part(part);
            v.is_finite().then(|| diagonal_variance(v))
        })
    }
}

/// Weights for the points of one part from their kept variances: the estimate
/// [`weights`] makes of a diagonal covariance, bit for bit, without a pass over the samples
/// per fit. `None` (the caller takes [`weights`], which words the error) unless the
/// covariance is diagonal without an eigenvalue cut and the points pass its input checks (one
/// resampling of at least two samples, as many bins as jackknife samples, finite, positive
/// variances).
fn weights_from_kept(
    points: &[&ReIm],
    cached: &[&PointKept],
    part: Part,
    cov: CovarianceSetup<'_>,
) -> Option<(Weights, Vec<String>)> {
    let opts = cov.options;
    if !matches!(opts.kind, CovarianceKind::Diagonal) || opts.eigen_cut.is_some() {
        return None;
    }
    let first = points.first()?.part(part);
    let (n, scheme) = (first.len(), first.scheme);
    let bins_ok = n >= 2 && cov.n_bins >= 2 && (scheme != Scheme::Jackknife || cov.n_bins == n);
    if !bins_ok || cached.len() != points.len() {
        return None;
    }
    let variances = points
        .iter()
        .zip(cached)
        .map(|(p, c)| {
            let v = p.part(part);
            (v.len() == n && v.scheme == scheme)
                .then(|| c.variance(part, p))
                .flatten()
                .filter(|&var| var > 0.0)
        })
        .collect::<Option<Vec<f64>>>()?;
    let est = diagonal_from_variances(variances, opts, cov.n_bins);
    let w = Weights::from_covariance(&est.matrix).ok()?;
    Some((w, est.warnings))
}

/// [`ResamplePlan::sample_error_scales`] of the jackknife pseudo-values of `p` (`pseudo`: a
/// buffer of one value per sample), the same operations in one function: the pseudo-values'
/// mean, their leave-one-out variances about it, and the variance of all of them
/// (`sum (x - m)^2 / (n - 1)`, the same sum of the same squares as the leave-one-out formula's
/// `Q`), so the same bits (unit test below).
fn pseudo_value_scales(p: &Resampled, pseudo: &mut [f64]) -> Vec<f64> {
    let n = p.samples.len();
    let k = n as f64 - 1.0;
    for (y, x) in pseudo.iter_mut().zip(&p.samples) {
        *y = p.central + k * (p.central - x);
    }
    let m = stable_mean(pseudo);
    let q: f64 = pseudo.iter().map(|v| (v - m) * (v - m)).sum();
    let s2 = q / k;
    if s2.is_nan() || s2 <= 0.0 {
        return pseudo
            .iter()
            .map(|v| {
                let d = v - m;
                let var = ((q - d * d - d * d / k) / (k - 1.0)).max(0.0);
                if var.is_nan() {
                    var
                } else {
                    1.0
                }
            })
            .collect();
    }
    pseudo
        .iter()
        .map(|v| {
            let d = v - m;
            (((q - d * d - d * d / k) / (k - 1.0)).max(0.0) / s2).sqrt()
        })
        .collect()
}

/// Fit `points` with `design`, weights `w` (their correlations frozen). With `scales` (per
/// point, per sample: see [`jackknife_sample_scales`]) each resample weights its points by its
/// own errors, `W S^{-1}` with `S = diag(scales)` (rows of the design and the data divided by
/// the scales before the whitening), so every resample is solved on its own; without, a fixed
/// design is factorised once for all resamples. Returns one resampled value per parameter and
/// the quality of the central fit.
pub(crate) fn fit_resampled(
    points: &[&Resampled],
    design: &Design<'_>,
    w: &Weights,
    scales: Option<&[&[f64]]>,
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
    let per_param = match (design, scales) {
        (Design::Fixed(a), None) => {
            let columns: Vec<&[f64]> = points.iter().map(|p| p.samples.as_slice()).collect();
            linear::FixedDesign::new(a, w)
                .and_then(|f| f.solve_many(&columns))
                .map_err(wrap(what))?
        }
        _ => per_sample(points, design, w, scales, what)?,
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

/// Every resample solved on its own (buffers allocated once per fit), its design and data
/// rows divided by its scales when given. Uncorrelated weights with at most four parameters
/// (every fit of the stage with the default weights) go through the normal equations: a fixed
/// design (plateau, summation) with scales for all resamples at once
/// ([`linear::solve_fixed_uncorrelated`]), otherwise per resample ([`linear::Uncorrelated`]);
/// a resample they leave, and correlated weights, go through [`linear::Workspace`]'s QR, which
/// decides every error.
fn per_sample(
    points: &[&Resampled],
    design: &Design<'_>,
    w: &Weights,
    scales: Option<&[&[f64]]>,
    what: &str,
) -> Result<Vec<Vec<f64>>> {
    let params = design.n_params();
    let n = points.len();
    let n_samples = points.first().map_or(0, |p| p.len());
    let mut per_param = vec![vec![0.0; n_samples]; params];
    // The whitening diagonal of uncorrelated weights, for fits the normal equations take.
    let diagonal = w
        .diagonal_factors()
        .filter(|_| params <= linear::Uncorrelated::MAX_PARAMS);
    // Row weight of point `i` in resample `s`: its whitening factor over its scale there.
    let row_weight = |d: &[f64], i: usize, s: usize| match scales {
        Some(scales) => d[i] * (1.0 / scales[i][s]),
        None => d[i],
    };
    let solved = match (design, scales, &diagonal) {
        (Design::Fixed(fixed), Some(_), Some(d)) => {
            let r: Vec<Vec<f64>> = (0..n)
                .map(|i| (0..n_samples).map(|s| row_weight(d, i, s)).collect())
                .collect();
            let ys: Vec<&[f64]> = points.iter().map(|p| p.samples.as_slice()).collect();
            let rs: Vec<&[f64]> = r.iter().map(Vec::as_slice).collect();
            linear::solve_fixed_uncorrelated(fixed, &ys, &rs, &mut per_param)
        }
        _ => vec![false; n_samples],
    };
    if solved.len() == n_samples && solved.iter().all(|&ok| ok) {
        return Ok(per_param);
    }
    let mut y = vec![0.0; n];
    let mut a = DMatrix::zeros(n, params);
    if let Design::Fixed(fixed) = design {
        a.copy_from(fixed);
    }
    let mut x = vec![0.0; params];
    let mut qr = linear::Workspace::new(n, params);
    let mut scaled = (DMatrix::zeros(0, 0), Vec::new());
    let mut fast = diagonal
        .as_ref()
        .and_then(|d| linear::Uncorrelated::new(n, params).map(|f| (f, d, vec![0.0; n])));
    for s in (0..n_samples).filter(|&s| solved.get(s) != Some(&true)) {
        for (y, p) in y.iter_mut().zip(points) {
            *y = p.samples[s];
        }
        if let Design::PerSample { fill, .. } = design {
            fill(Some(s), &mut a);
        }
        let done = fast.as_mut().is_some_and(|(solver, d, r)| {
            for (i, r) in r.iter_mut().enumerate() {
                *r = row_weight(d, i, s);
            }
            solver.try_solve(&a, &y, r, &mut x)
        });
        if !done {
            let (a_s, y_s) = &mut scaled;
            a_s.clone_from(&a);
            y_s.clone_from(&y);
            if let Some(scales) = scales {
                for (i, point_scales) in scales.iter().enumerate() {
                    let f = 1.0 / point_scales[s];
                    y_s[i] *= f;
                    for c in 0..params {
                        a_s[(i, c)] *= f;
                    }
                }
            }
            qr.solve(a_s, y_s, w, &mut x).map_err(wrap(what))?;
        }
        for (out, v) in per_param.iter_mut().zip(&x) {
            out[s] = *v;
        }
    }
    Ok(per_param)
}

/// Fit the real and the imaginary parts of `points` separately with the same design (see
/// [`fit_resampled`]). A part that is exactly zero on every point and sample (data without an
/// imaginary part, say) gives exactly zero parameters without a fit: its covariance is zero.
/// `cached`, one per point, keeps the points' jackknife scales for other fits of the same
/// points (`None`: computed for this fit alone). Returns the parameters and, in a [`ReImFit`],
/// the first of them with the fit qualities and the covariance warnings.
pub(crate) fn fit_re_im(
    points: &[&ReIm],
    cached: Option<&[&PointKept]>,
    design: Design<'_>,
    cov: CovarianceSetup<'_>,
    what: &str,
) -> Result<(Vec<ReIm>, ReImFit)> {
    let mut warnings = Vec::new();
    let mut part = |part: Part| -> Result<(Vec<Resampled>, FitQuality)> {
        let values: Vec<&Resampled> = points.iter().map(|p| p.part(part)).collect();
        let name = match part {
            Part::Re => "real",
            Part::Im => "imaginary",
        };
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
        let kept = cached.and_then(|c| weights_from_kept(points, c, part, cov));
        let (w, warn) = match kept {
            Some(kept) => kept,
            None => {
                let owned: Vec<Resampled> = values.iter().map(|&v| v.clone()).collect();
                weights(&owned, cov, &what)?
            }
        };
        warnings.extend(warn.into_iter().map(|m| format!("{what}: {m}")));
        // Each jackknife resample weights its points by its own errors (as the spectrum
        // stage); bootstrap samples have no per-bin values to take them from.
        let owned;
        let scales: Option<Vec<&[f64]>> = match cached {
            Some(cached) if cached.len() == n => {
                let len = values.first().map_or(0, |p| p.len());
                cached
                    .iter()
                    .zip(points)
                    .map(|(c, p)| c.get(part, p).filter(|s| s.len() == len))
                    .collect()
            }
            _ => {
                owned = jackknife_sample_scales(&values);
                owned
                    .as_ref()
                    .map(|s| s.iter().map(Vec::as_slice).collect())
            }
        };
        fit_resampled(&values, &design, &w, scales.as_deref(), &what)
    };
    let (re, quality_re) = part(Part::Re)?;
    let (im, quality_im) = part(Part::Im)?;
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::resample::covariance::CovarianceOptions;
    use approx::assert_relative_eq;

    fn bins(seed: u64, n: usize) -> Vec<f64> {
        // A fixed, irregular sequence (no random generator needed).
        (0..n)
            .map(|i| 1.0 + 0.1 * ((i as f64 + 0.3) * (seed as f64 + 1.7)).sin())
            .collect()
    }

    #[test]
    fn scales_of_a_mean_are_those_of_its_bins_and_fits_follow_them() {
        let n = 9;
        let plan = ResamplePlan::jackknife(n);
        let data: Vec<Vec<f64>> = (0..4).map(|k| bins(k, n)).collect();
        let owned: Vec<Resampled> = data.iter().map(|x| plan.mean(x)).collect();
        let points: Vec<&Resampled> = owned.iter().collect();
        // Identity: the jackknife pseudo-values of a mean are its bins.
        let scales = jackknife_sample_scales(&points).expect("jackknife scales");
        // The fused computation gives the plan's scales of the pseudo-values bit for bit.
        for (s, p) in scales.iter().zip(&points) {
            let pseudo: Vec<f64> = p
                .samples
                .iter()
                .map(|x| p.central + (n as f64 - 1.0) * (p.central - x))
                .collect();
            let want = plan.sample_error_scales(&pseudo);
            assert!(s.iter().zip(&want).all(|(a, b)| a.to_bits() == b.to_bits()));
        }
        for (s, x) in scales.iter().zip(&data) {
            for (a, b) in s.iter().zip(plan.sample_error_scales(x)) {
                assert_relative_eq!(*a, b, max_relative = 1e-9);
            }
        }
        let errors: Vec<f64> = points.iter().map(|p| p.error()).collect();
        let w = Weights::diagonal(&errors);
        let design = Design::Fixed(DMatrix::from_element(4, 1, 1.0));
        // Scales of 1 give the factorised (frozen-weight) fit.
        let ones = vec![vec![1.0; n]; 4];
        let (frozen, _) = fit_resampled(&points, &design, &w, None, "test").unwrap();
        let ones: Vec<&[f64]> = ones.iter().map(Vec::as_slice).collect();
        let (same, _) = fit_resampled(&points, &design, &w, Some(&ones), "test").unwrap();
        for (a, b) in frozen[0].samples.iter().zip(&same[0].samples) {
            assert_relative_eq!(*a, *b, max_relative = 1e-12);
        }
        // With its own scales, sample j of a constant fit is the weighted mean with weights
        // 1/(sigma_i s_ij)^2 (definition of the weighted least-squares constant).
        let own_scales: Vec<&[f64]> = scales.iter().map(Vec::as_slice).collect();
        let (own, _) = fit_resampled(&points, &design, &w, Some(&own_scales), "test").unwrap();
        for (j, fitted) in own[0].samples.iter().enumerate() {
            let wts: Vec<f64> = errors
                .iter()
                .zip(&scales)
                .map(|(e, s)| (e * s[j]).powi(-2))
                .collect();
            let mean = wts
                .iter()
                .zip(&points)
                .map(|(w, p)| w * p.samples[j])
                .sum::<f64>()
                / wts.iter().sum::<f64>();
            assert_relative_eq!(*fitted, mean, max_relative = 1e-10);
        }
        // Bootstrap samples: no scales.
        let boot = ResamplePlan::bootstrap(n, 20, 1);
        assert!(jackknife_sample_scales(&[&boot.mean(&data[0])]).is_none());
    }

    // The cache is an optimisation only: a fit with cached scales, and a second fit reusing
    // them, give the bits of a fit that computes them itself.
    #[test]
    fn cached_scales_give_the_same_fit_bit_for_bit() {
        let n = 11;
        let plan = ResamplePlan::jackknife(n);
        let points: Vec<ReIm> = (0..5)
            .map(|k| ReIm {
                re: plan.mean(&bins(k, n)),
                im: plan.mean(&bins(k + 7, n)),
            })
            .collect();
        let refs: Vec<&ReIm> = points.iter().collect();
        let line = || Design::Fixed(DMatrix::from_fn(5, 2, |i, j| (i * j) as f64 + 1.0));
        let bits = |fit: &[ReIm]| -> Vec<u64> {
            fit.iter()
                .flat_map(|p| {
                    let (re, im) = (&p.re, &p.im);
                    let all = re.samples.iter().chain(&im.samples);
                    [re.central, im.central].into_iter().chain(all.copied())
                })
                .map(f64::to_bits)
                .collect()
        };
        // The stage's default (diagonal, variances kept too) and a full covariance.
        let diagonal = CovarianceOptions {
            kind: CovarianceKind::Diagonal,
            eigen_cut: None,
        };
        for options in [diagonal, CovarianceOptions::default()] {
            let caches = vec![PointKept::default(); points.len()];
            let cached: Vec<&PointKept> = caches.iter().collect();
            let cov = CovarianceSetup {
                options: &options,
                n_bins: n,
            };
            let (plain, _) = fit_re_im(&refs, None, line(), cov, "test").unwrap();
            let (first, _) = fit_re_im(&refs, Some(&cached), line(), cov, "test").unwrap();
            let (again, _) = fit_re_im(&refs, Some(&cached), line(), cov, "test").unwrap();
            assert!(caches
                .iter()
                .all(|c| c.re.scales.get().is_some_and(Option::is_some)));
            let kept_variances = caches
                .iter()
                .all(|c| c.im.variance.get().is_some_and(Option::is_some));
            assert_eq!(kept_variances, options == diagonal);
            assert_eq!(bits(&plain), bits(&first));
            assert_eq!(bits(&plain), bits(&again));
        }
    }

    // The kept variances give the weights and warnings of the covariance estimate itself
    // (the diagonal estimate of `resample::covariance`), bit for bit; anything that estimate
    // would refuse is left to it.
    #[test]
    fn kept_variances_give_the_estimates_weights_or_leave_it_the_error() {
        let n = 7;
        let plan = ResamplePlan::jackknife(n);
        let mut points: Vec<ReIm> = (0..4)
            .map(|k| ReIm {
                re: plan.mean(&bins(k, n)),
                im: plan.mean(&bins(k + 3, n)),
            })
            .collect();
        let options = CovarianceOptions {
            kind: CovarianceKind::Diagonal,
            eigen_cut: None,
        };
        let cov = CovarianceSetup {
            options: &options,
            n_bins: n,
        };
        let check = |points: &[ReIm]| {
            let refs: Vec<&ReIm> = points.iter().collect();
            let caches = vec![PointKept::default(); points.len()];
            let cached: Vec<&PointKept> = caches.iter().collect();
            [Part::Re, Part::Im].map(|part| {
                let owned: Vec<Resampled> = points.iter().map(|p| p.part(part).clone()).collect();
                let direct = weights(&owned, cov, "test").ok();
                let kept = weights_from_kept(&refs, &cached, part, cov);
                if let (Some((wd, md)), Some((wk, mk))) = (&direct, &kept) {
                    let bits =
                        |w: &Weights| w.matrix().iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                    assert_eq!(bits(wd), bits(wk));
                    assert_eq!(md, mk);
                }
                (direct.is_some(), kept.is_some())
            })
        };
        assert_eq!(check(&points), [(true, true), (true, true)]);
        // A constant point (zero variance) and a non-finite one: the estimate's errors.
        points[1].re = Resampled::constant(2.0, n, Scheme::Jackknife);
        points[2].im.samples[3] = f64::NAN;
        assert_eq!(check(&points), [(false, false), (false, false)]);
        // Other estimates (a full covariance, an eigenvalue cut) are not taken from kept
        // variances.
        let cut = CovarianceOptions {
            eigen_cut: Some(1e-3),
            ..options
        };
        let refs: Vec<&ReIm> = points[..1].iter().collect();
        let caches = [PointKept::default()];
        let cached: Vec<&PointKept> = caches.iter().collect();
        for other in [cut, CovarianceOptions::default()] {
            let other = CovarianceSetup {
                options: &other,
                n_bins: n,
            };
            assert!(weights_from_kept(&refs, &cached, Part::Re, other).is_none());
        }
    }
}

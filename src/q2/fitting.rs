//! Fitting one form factor's Q² dependence: the points checked, the shape built from the
//! settings (with the automatic prior of a z-expansion), a weighted least-squares fit on the
//! central value and on every resample, and the `kmax + 1` study of a z-expansion.

use super::priors::{self, auto_prior, PriorRule, ZPrior};
use super::q2_error;
use super::result::{KmaxStudy, Q2Fit, Q2Point, Q2Units};
use super::settings::{Q2FitSettings, Q2Model, T0};
use super::shapes::{t0_optimal, Shape, ZExpansion};
use crate::fit::{nonlinear, FitReport, Model, Weighting, Weights};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;
use rayon::prelude::*;

/// The model of a Q² fit: one shape evaluated at the points' Q².
struct Curve<'a> {
    shape: &'a Shape,
    q2: &'a [f64],
}

impl Model for Curve<'_> {
    fn n_params(&self) -> usize {
        self.shape.n_params()
    }
    fn n_points(&self) -> usize {
        self.q2.len()
    }
    fn eval(&self, params: &[f64], out: &mut [f64]) {
        for (o, &x) in out.iter_mut().zip(self.q2) {
            *o = self.shape.value(params, x);
        }
    }
    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>) {
        let mut g = vec![0.0; self.shape.n_params()];
        for (i, &x) in self.q2.iter().enumerate() {
            self.shape.gradient(params, x, &mut g);
            for (j, v) in g.iter().enumerate() {
                out[(i, j)] = *v;
            }
        }
    }
}

/// Fit one form factor's Q² dependence, on the central value and on every resample.
///
/// Priors enter every resample with their own uncertainty (centres drawn per resample, see
/// the `priors` module); a z-expansion is also fitted with `kmax + 1` and the change reported.
///
/// Errors: no points, inconsistent sample counts, non-finite values, invalid settings,
/// singular weights, or a central fit that does not converge. Resample fits that do not
/// converge are counted in [`Q2Fit::n_failed`].
pub fn fit(points: &[Q2Point], settings: &Q2FitSettings, units: Q2Units) -> Result<Q2Fit> {
    let points = checked_points(points, settings)?;
    let q2_max = points.iter().map(|p| p.q2.central).fold(f64::MIN, f64::max);
    let (shape, prior_note) = build_shape(&settings.model, q2_max, &points, settings)?;
    let mut out = fit_shape(&points, &shape, settings, units)?;
    out.prior_note = prior_note;
    if let Shape::ZExpansion(e) = &shape {
        let next = ZExpansion::new(e.t_cut, e.t0, e.kmax + 1, e.sum_rules, e.prior)
            .map(|n| n.with_pole(e.pole_mass2));
        if let Some(next) = next {
            match fit_shape(&points, &Shape::ZExpansion(next), settings, units) {
                Ok(f) => {
                    let shift = |a: &Resampled, b: &Resampled| (b.central - a.central) / a.error();
                    let study = KmaxStudy {
                        kmax: e.kmax + 1,
                        g0_shift_sigma: shift(&out.g0, &f.g0),
                        r2_shift_sigma: shift(&out.r2, &f.r2),
                        g0: f.g0,
                        r2: f.r2,
                    };
                    if study.g0_shift_sigma.abs() > 1.0 || study.r2_shift_sigma.abs() > 1.0 {
                        out.warnings.push(format!(
                            "kmax {} -> {}: G(0) moves by {:.2} sigma and r2 by {:.2} sigma; the truncation is not under control",
                            e.kmax, study.kmax, study.g0_shift_sigma, study.r2_shift_sigma
                        ));
                    }
                    out.kmax_study = Some(study);
                }
                Err(err) => out
                    .warnings
                    .push(format!("kmax {} fit failed: {err}", e.kmax + 1)),
            }
        }
    }
    Ok(out)
}

/// The points within `q2_max`, checked for equal sample counts and finite values.
fn checked_points<'a>(points: &'a [Q2Point], settings: &Q2FitSettings) -> Result<Vec<&'a Q2Point>> {
    let points: Vec<&Q2Point> = points
        .iter()
        .filter(|p| settings.q2_max.is_none_or(|m| p.q2.central <= m))
        .collect();
    let first = points
        .first()
        .ok_or_else(|| q2_error("no form-factor values to fit (check q2_max)"))?;
    let (n, scheme) = (first.value.len(), first.value.scheme);
    for p in &points {
        for r in [&p.q2, &p.value] {
            if r.len() != n || r.scheme != scheme {
                return Err(q2_error(format!(
                    "the value at Q2 = {} has {} samples ({:?}), expected {n} ({scheme:?})",
                    p.q2.central,
                    r.len(),
                    r.scheme
                )));
            }
            if !r.is_finite() {
                return Err(q2_error(format!(
                    "the value at Q2 = {} is not finite",
                    p.q2.central
                )));
            }
        }
    }
    Ok(points)
}

/// One shape fitted to the central value and every resample (prior centres drawn per
/// resample).
fn fit_shape(
    points: &[&Q2Point],
    shape: &Shape,
    settings: &Q2FitSettings,
    units: Q2Units,
) -> Result<Q2Fit> {
    let (n, scheme) = (points[0].value.len(), points[0].value.scheme);
    let weights = weights(points, settings.weights)?;
    let x_at = |s: Option<usize>| -> Vec<f64> {
        points
            .iter()
            .map(|p| s.map_or(p.q2.central, |i| p.q2.samples[i]))
            .collect()
    };
    let y_at = |s: Option<usize>| -> Vec<f64> {
        points
            .iter()
            .map(|p| s.map_or(p.value.central, |i| p.value.samples[i]))
            .collect()
    };
    let priors = shape.priors();
    let n_priors = priors.iter().flatten().count();
    let shifts = priors::centre_shifts(n, n_priors, scheme);
    let run = |s: Option<usize>, start: &[f64]| -> FitReport {
        let x = x_at(s);
        let model = Curve { shape, q2: &x };
        match s {
            None => nonlinear::fit(&model, &y_at(s), &weights, &priors, start, &settings.solver),
            Some(i) => nonlinear::fit_without_covariance(
                &model,
                &y_at(s),
                &weights,
                &priors::shifted(&priors, &shifts[i]),
                start,
                &settings.solver,
            ),
        }
    };
    let start = start_values(shape, &x_at(None), &y_at(None));
    let central = run(None, &start);
    if !central.converged {
        return Err(q2_error(format!(
            "the {} fit of the central value did not converge: {}",
            shape_name(shape),
            central.message
        )));
    }
    let reports: Vec<FitReport> = (0..n)
        .into_par_iter()
        .map(|s| run(Some(s), &central.params))
        .collect();
    let n_failed = reports.iter().filter(|r| !r.converged).count();
    let params: Vec<Resampled> = (0..shape.n_params())
        .map(|j| {
            Resampled::new(
                central.params[j],
                reports.iter().map(|r| r.params[j]).collect(),
                scheme,
            )
        })
        .collect();
    let refs: Vec<&Resampled> = params.iter().collect();
    let g0 = Resampled::combine(&refs, |p| shape.value(p, 0.0));
    let slope = Resampled::combine(&refs, |p| shape.slope0(p));
    let r2 = slope.zip_map(&g0, |d, g| -6.0 * d / g);
    let names = shape.names();
    Ok(Q2Fit {
        r2_fm2: units.length2_to_fm2().map(|f| &r2 * f),
        warnings: priors::diagnose(&names, &priors, &central),
        names,
        shape: shape.clone(),
        units,
        params,
        g0,
        slope,
        r2,
        chi2: central.chi2,
        dof: central.dof,
        p_value: central.p_value,
        n_points: points.len(),
        n_failed,
        prior_note: None,
        kmax_study: None,
    })
}

fn shape_name(shape: &Shape) -> &'static str {
    match shape {
        Shape::Dipole { .. } => "dipole",
        Shape::ZExpansion(_) => "z-expansion",
    }
}

/// The central dipole fit `(G0, M²)` of the points, the reference of the automatic prior.
fn reference_dipole(points: &[&Q2Point], settings: &Q2FitSettings) -> Option<(f64, f64)> {
    let shape = Shape::Dipole { power: 2.0 };
    let x: Vec<f64> = points.iter().map(|p| p.q2.central).collect();
    let y: Vec<f64> = points.iter().map(|p| p.value.central).collect();
    let w = weights(points, Weighting::Diagonal).ok()?;
    let model = Curve {
        shape: &shape,
        q2: &x,
    };
    let start = start_values(&shape, &x, &y);
    let r = nonlinear::fit_without_covariance(&model, &y, &w, &[], &start, &settings.solver);
    (r.converged && r.params[1] > 0.0).then(|| (r.params[0], r.params[1]))
}

fn build_shape(
    model: &Q2Model,
    q2_max: f64,
    points: &[&Q2Point],
    settings: &Q2FitSettings,
) -> Result<(Shape, Option<String>)> {
    match *model {
        Q2Model::Dipole { power } => {
            if !(power.is_finite() && power > 0.0) {
                return Err(Error::config(format!(
                    "dipole power must be positive, got {power}"
                )));
            }
            Ok((Shape::Dipole { power }, None))
        }
        Q2Model::ZExpansion {
            t_cut,
            t0,
            kmax,
            prior,
            sum_rules,
            pole_mass,
        } => {
            let t_cut = t_cut.value();
            if !(t_cut.is_finite() && t_cut > 0.0) {
                return Err(Error::config(format!(
                    "z-expansion t_cut must be positive, got {t_cut}"
                )));
            }
            let t0 = match t0 {
                T0::Zero => 0.0,
                T0::Optimal => t0_optimal(t_cut, q2_max.max(0.0)),
                T0::Value(v) => v,
            };
            if t0.is_nan() || t0 >= t_cut {
                return Err(Error::config(format!(
                    "z-expansion t0 = {t0} must lie below t_cut = {t_cut}"
                )));
            }
            if let Some(m) = pole_mass {
                if !(m.is_finite() && m > 0.0) {
                    return Err(Error::config(format!(
                        "z-expansion pole_mass must be positive, got {m}"
                    )));
                }
            }
            let pole = pole_mass.map(|m| m * m);
            let e = ZExpansion::new(t_cut, t0, kmax, sum_rules, None).ok_or_else(|| {
                Error::config(format!(
                    "z-expansion: {sum_rules} sum rules need kmax >= {sum_rules} and at most 4 sum rules (kmax = {kmax})"
                ))
            })?
            .with_pole(pole);
            let (prior, note) = match prior {
                None => (None, "no prior on a_k/a_0".to_string()),
                Some(ZPrior::Fixed(p)) => {
                    if !p.is_valid() {
                        return Err(Error::config(format!(
                            "z-expansion prior needs a finite mean and positive width, got {} +- {}",
                            p.mean, p.width
                        )));
                    }
                    (
                        Some(p),
                        format!("a_k/a_0 ~ N({}, {}^2) as set", p.mean, p.width),
                    )
                }
                Some(ZPrior::Rule(PriorRule::Auto)) => {
                    let (p, note) = auto_prior(&e, q2_max, reference_dipole(points, settings));
                    (Some(p), note)
                }
            };
            let mut e = e;
            e.prior = prior;
            Ok((Shape::ZExpansion(e), Some(note)))
        }
    }
}

fn weights(points: &[&Q2Point], choice: Weighting) -> Result<Weights> {
    let errors: Vec<f64> = points.iter().map(|p| p.value.error()).collect();
    if let Some((i, e)) = errors
        .iter()
        .enumerate()
        .find(|(_, e)| !(**e > 0.0 && e.is_finite()))
    {
        return Err(q2_error(format!(
            "the form factor at Q2 = {} has error {e}; positive finite errors expected",
            points[i].q2.central
        )));
    }
    let values: Vec<Resampled> = points.iter().map(|p| p.value.clone()).collect();
    choice.weights(&values)
}

/// Starting values: the dipole from the lowest and highest Q² points, the z-expansion from
/// `a_0` at the lowest point and the prior means.
fn start_values(shape: &Shape, x: &[f64], y: &[f64]) -> Vec<f64> {
    let lo = (0..x.len())
        .min_by(|&a, &b| x[a].total_cmp(&x[b]))
        .unwrap_or(0);
    let hi = (0..x.len())
        .max_by(|&a, &b| x[a].total_cmp(&x[b]))
        .unwrap_or(0);
    match shape {
        Shape::Dipole { power } => {
            let g0 = y[lo];
            let ratio = (g0 / y[hi]).powf(1.0 / power) - 1.0;
            let m2 = if x[hi] > 0.0 && ratio > 0.0 && ratio.is_finite() {
                x[hi] / ratio
            } else {
                x[hi].abs().max(1e-3)
            };
            vec![g0, m2]
        }
        Shape::ZExpansion(e) => {
            let mut s = vec![y[lo]];
            s.extend(std::iter::repeat_n(
                e.prior.map_or(0.0, |p| p.mean),
                e.n_free(),
            ));
            s
        }
    }
}

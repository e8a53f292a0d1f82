//! Q² dependence of form factors: dipole and z-expansion fits per resample, and the derived
//! radii, moments and charges (docs/methods.md §6).
//!
//! Why it exists: the decomposition gives form factors at a handful of Q² shells; the physics
//! lives in their value and slope at `Q² = 0`. Two shapes are fitted, each on the central
//! value and on every resample with weights held fixed (common practice):
//! - dipole `G(Q²) = G(0) / (1 + Q²/M²)^p` (p = 2 by default), `r² = 6 p / M²`;
//! - z-expansion (Hill & Paz, Phys. Rev. D 82 (2010) 113005) `G = sum_k a_k z^k`, Gaussian
//!   priors on `a_k / a_0`, optional large-Q² sum rules `sum_k k^n a_k = 0`, `n = 0..3`
//!   (Lee, Arrington & Hill, Phys. Rev. D 92 (2015) 013013) imposed exactly by eliminating
//!   the highest coefficients.
//!
//! Derived: `r² = -6 G'(0)/G(0)` (fm² through the lattice spacing or `hbar c`), `G(0)` (the
//! magnetic moment for `G_M`, the axial charge for `G_A`), and Dirac/Pauli radii from the
//! Sachs fits ([`dirac_pauli_radii`]).

mod priors;
mod radii;
mod shapes;

pub use priors::{
    auto_prior, centre_shifts, z_coefficients, PriorRule, ZPrior, AUTO_FACTOR, MIN_AUTO_WIDTH,
    PRIOR_DOMINATED, PRIOR_EDGE,
};
pub use radii::{dirac_pauli_radii, DiracPauli};
pub use shapes::{dz_dq2, t0_optimal, z, Shape, ZExpansion};

use crate::fit::{nonlinear, FitReport, FitSettings, Model, Weighting, Weights};
use crate::kinematics::HBARC_GEV_FM;
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;
use rayon::prelude::*;
use serde::de::{self, EnumAccess, MapAccess, VariantAccess, Visitor};
use serde::{Deserialize, Deserializer, Serialize};
use std::fmt;

/// Which shape to fit, with its options.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(tag = "model", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Q2Model {
    /// `G(0) / (1 + Q²/M²)^power`.
    Dipole {
        /// Exponent (2 = dipole, 1 = monopole).
        #[serde(default = "default_power")]
        power: f64,
    },
    /// z-expansion.
    ZExpansion {
        /// Branch-point `t_cut`.
        t_cut: TCut,
        /// Choice of `t0`.
        #[serde(default)]
        t0: T0,
        /// Highest power of `z`.
        #[serde(default = "default_kmax")]
        kmax: usize,
        /// Gaussian prior on every free `a_k / a_0`: `auto` (the default: width from the
        /// data's range in `z`, see the report), `{mean, width}`, or `null` for none.
        #[serde(default = "default_prior")]
        prior: Option<ZPrior>,
        /// Number of sum rules `sum_k k^n a_k = 0` imposed, `n = 0..sum_rules` (0 to 4).
        #[serde(default)]
        sum_rules: usize,
        /// Mass of an explicit pole factor `1/(1 + Q²/M²)` (units of `sqrt(Q²)`), for heavy
        /// pions where the lowest meson lies below `t_cut`; `null` for none.
        #[serde(default)]
        pole_mass: Option<f64>,
    },
}

fn default_power() -> f64 {
    2.0
}
fn default_kmax() -> usize {
    4
}
fn default_prior() -> Option<ZPrior> {
    Some(ZPrior::default())
}

/// `t_cut` in the units of the fitted Q²: a value or a multi-pion threshold `(n m_pi)²`
/// (4 m_pi² for the isovector vector current, 9 m_pi² for the isovector axial current).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(untagged)]
pub enum TCut {
    /// An explicit `t_cut`.
    Value(f64),
    /// `(n_pions * pion_mass)²`.
    Threshold {
        /// Pion mass in the units of `sqrt(Q²)`.
        pion_mass: f64,
        /// Number of pions (2 vector, 3 axial).
        n_pions: u32,
    },
}

impl TCut {
    /// The value of `t_cut`.
    pub fn value(self) -> f64 {
        match self {
            TCut::Value(v) => v,
            TCut::Threshold { pion_mass, n_pions } => (f64::from(n_pions) * pion_mass).powi(2),
        }
    }
}

/// Choice of `t0` in the z-expansion.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, schemars::JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum T0 {
    /// `t0 = 0`, so that `z(0) = 0`.
    #[default]
    Zero,
    /// `t0 = t_cut (1 - sqrt(1 + Q²_max / t_cut))` with `Q²_max` the largest fitted Q².
    Optimal,
    /// An explicit value.
    Value(f64),
}

const T0_NAMES: &[&str] = &["zero", "optimal", "value"];

/// Read in every form a user writes: `zero`, `optimal`, a one-key map `{value: 0.1}` (the
/// form of the JSON Schema) or a YAML tag `!value 0.1` (the form serde_yaml_ng writes).
impl<'de> Deserialize<'de> for T0 {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> std::result::Result<Self, D::Error> {
        struct Visit;
        impl<'de> Visitor<'de> for Visit {
            type Value = T0;

            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("`zero`, `optimal` or `{value: <t0>}`")
            }

            fn visit_str<E: de::Error>(self, s: &str) -> std::result::Result<T0, E> {
                match s {
                    "zero" => Ok(T0::Zero),
                    "optimal" => Ok(T0::Optimal),
                    other => Err(E::unknown_variant(other, T0_NAMES)),
                }
            }

            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<T0, A::Error> {
                let Some(key) = map.next_key::<String>()? else {
                    return Err(de::Error::invalid_length(0, &self));
                };
                let value = match key.as_str() {
                    "value" => T0::Value(map.next_value()?),
                    other => return Err(de::Error::unknown_variant(other, T0_NAMES)),
                };
                if map.next_key::<de::IgnoredAny>()?.is_some() {
                    return Err(de::Error::invalid_length(2, &self));
                }
                Ok(value)
            }

            fn visit_enum<A: EnumAccess<'de>>(self, data: A) -> std::result::Result<T0, A::Error> {
                let (name, variant): (String, _) = data.variant()?;
                match name.as_str() {
                    "zero" => variant.unit_variant().map(|()| T0::Zero),
                    "optimal" => variant.unit_variant().map(|()| T0::Optimal),
                    "value" => variant.newtype_variant().map(T0::Value),
                    other => Err(de::Error::unknown_variant(other, T0_NAMES)),
                }
            }
        }
        deserializer.deserialize_any(Visit)
    }
}

/// Settings of one Q² fit: the shape (`model` and its keys) and how it is fitted.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
pub struct Q2FitSettings {
    /// The shape.
    #[serde(flatten)]
    pub model: Q2Model,
    /// Weights.
    #[serde(default)]
    pub weights: Weighting,
    /// Fit only points with central Q² at most this (units of the fitted Q²).
    #[serde(default)]
    pub q2_max: Option<f64>,
    /// Solver settings.
    #[serde(default)]
    pub solver: FitSettings,
}

/// Units of the Q² handed to a fit; fixes the conversion of radii to fm².
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub enum Q2Units {
    /// Lattice units, with the spacing in fm when known.
    Lattice {
        /// Lattice spacing `a` in fm.
        spacing_fm: Option<f64>,
    },
    /// GeV².
    GeV2,
}

impl Q2Units {
    /// Factor turning `1/Q²` (a squared length in these units) into fm².
    pub fn length2_to_fm2(self) -> Option<f64> {
        match self {
            Q2Units::Lattice { spacing_fm } => spacing_fm.map(|a| a * a),
            Q2Units::GeV2 => Some(HBARC_GEV_FM * HBARC_GEV_FM),
        }
    }
}

/// One form-factor value at one Q², both resampled.
#[derive(Clone, Debug, PartialEq)]
pub struct Q2Point {
    /// Q² in the fit's units.
    pub q2: Resampled,
    /// The form factor.
    pub value: Resampled,
}

/// The outcome of one Q² fit.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Q2Fit {
    /// The fitted shape.
    pub shape: Shape,
    /// Units of Q².
    pub units: Q2Units,
    /// Parameter names.
    pub names: Vec<String>,
    /// Parameters, resampled.
    pub params: Vec<Resampled>,
    /// `G(0)`: the magnetic moment for `G_M`, the axial charge for `G_A`.
    pub g0: Resampled,
    /// `G'(0)` in units of `1/Q²`.
    pub slope: Resampled,
    /// `r² = -6 G'(0)/G(0)` in units of `1/Q²`.
    pub r2: Resampled,
    /// `r²` in fm², when the units allow.
    pub r2_fm2: Option<Resampled>,
    /// Central chi-square (prior terms included).
    pub chi2: f64,
    /// Points minus parameters.
    pub dof: i64,
    /// p-value of the central fit.
    pub p_value: f64,
    /// Points fitted.
    pub n_points: usize,
    /// Resamples whose fit did not converge (their parameters are kept and counted here).
    pub n_failed: usize,
    /// The prior used, in words (z-expansion only).
    pub prior_note: Option<String>,
    /// Coefficients decided by their prior, or at its edge; a large change with `kmax + 1`.
    pub warnings: Vec<String>,
    /// The same fit with `kmax + 1` (z-expansion only).
    pub kmax_study: Option<KmaxStudy>,
}

/// A z-expansion refitted with one more coefficient, to judge the truncation.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct KmaxStudy {
    /// The higher `kmax`.
    pub kmax: usize,
    /// `G(0)` with `kmax + 1`.
    pub g0: Resampled,
    /// `r²` with `kmax + 1`, units of `1/Q²`.
    pub r2: Resampled,
    /// `(G(0)[kmax+1] - G(0)[kmax]) / sigma(G(0)[kmax])`.
    pub g0_shift_sigma: f64,
    /// `(r²[kmax+1] - r²[kmax]) / sigma(r²[kmax])`.
    pub r2_shift_sigma: f64,
}

impl Q2Fit {
    /// The fitted curve at `q2`, resampled (for plots and error bands).
    pub fn evaluate(&self, q2: f64) -> Resampled {
        let refs: Vec<&Resampled> = self.params.iter().collect();
        Resampled::combine(&refs, |p| self.shape.value(p, q2))
    }

    /// `chi2 / dof`, `None` when `dof <= 0`.
    pub fn chi2_dof(&self) -> Option<f64> {
        (self.dof > 0).then(|| self.chi2 / self.dof as f64)
    }

    /// The radius `sqrt(r²)` in fm; `None` without a length scale or when `r²` is not
    /// positive on the central value and every sample.
    pub fn radius_fm(&self) -> Option<Resampled> {
        let r2 = self.r2_fm2.as_ref()?;
        (r2.central > 0.0 && r2.samples.iter().all(|x| *x > 0.0)).then(|| r2.sqrt())
    }
}

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

pub(crate) fn q2_error(message: impl Into<String>) -> Error {
    Error::analysis("q2", message)
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

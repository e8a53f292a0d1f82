//! The combination fit: one quantity measured on several ensembles, fitted against a² and
//! m_π² (and optionally e^{-m_π L}) and evaluated at the physical point.
//!
//! Forms (all linear in their parameters, solved by [`crate::fit::linear`]):
//! - `linear`: `y = c_0 + c_a a² + c_m (m_π² - m_π,phys²) [+ c_L e^{-m_π L}]`;
//! - `pion_radius_log`: the linear form plus the one-loop chiral logarithm of the pion's
//!   vector radius, `-1/(16 π² F²) ln(m_π²/m_π,phys²)` (Gasser & Leutwyler, Ann. Phys. 158
//!   (1984) 142: `<r²>_V = (l̄_6 - 1)/(16 π² F²)` with `l̄_6 = ln(Λ_6²/m_π²)`);
//! - `nucleon_radius_log`: the linear form plus the one-loop logarithm of the nucleon's
//!   isovector Dirac radius, `-(1 + 5 g_A²)/(16 π² F²) ln(m_π²/m_π,phys²)` (Bernard, Fearing,
//!   Hemmert & Meißner, Nucl. Phys. A 635 (1998) 121).
//!
//! The logarithm's coefficient is fixed (F and g_A at their physical values); its scale is
//! the physical pion mass, so every correction term vanishes at the physical point and
//! `c_0` is the result there.
//!
//! Errors: ensembles are independent, quantities within an ensemble correlated. The
//! super-jackknife keeps both: the fit is repeated on every resample of one ensemble with
//! every other ensemble at its central value; each ensemble contributes the variance of its
//! own resamples (by its scheme's formula) and the contributions add. A lattice-spacing
//! error adds one more block per ensemble: the fit with that spacing moved up by one sigma
//! (in a², in m_π in GeV and in the quantity's fm power), contributing the squared shift
//! (linear error propagation). The weights are the ensembles' statistical errors, frozen.

use super::spec::{FitForm, QuantitySpec, ValueError};
use crate::fit::{linear, Weights};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;

/// ħc in GeV fm (CODATA 2018).
pub const HBARC_GEV_FM: f64 = 0.197_326_980_4;
/// Pion decay constant F ≈ f_π/√2 in GeV (PDG, 92.1 MeV; from memory).
pub const F_PI_GEV: f64 = 0.0921;
/// Nucleon axial charge g_A (PDG, 1.2754; from memory).
pub const G_A: f64 = 1.2754;

/// Number of fit parameters of a quantity's form.
pub fn n_params(q: &QuantitySpec) -> usize {
    3 + usize::from(q.volume)
}

/// One ensemble's measurement of the quantity.
#[derive(Clone, Debug)]
pub struct Point {
    /// Ensemble name.
    pub ensemble: String,
    /// Lattice spacing in fm with its error.
    pub spacing_fm: ValueError,
    /// Pion mass in lattice units.
    pub pion_mass: f64,
    /// Spatial extent.
    pub l: u32,
    /// The value with its resamples.
    pub value: Resampled,
    /// Power of fm in the quantity's unit (2 for fm², 0 for a pure number).
    pub fm_power: i32,
}

impl Point {
    /// m_π in GeV at spacing `a` (fm).
    fn mpi_gev(&self, a: f64) -> f64 {
        self.pion_mass * HBARC_GEV_FM / a
    }
}

/// The fit's abscissae, in physical units.
#[derive(Clone, Copy, Debug)]
pub struct Abscissa {
    /// a² in fm².
    pub a2: f64,
    /// m_π² in GeV².
    pub mpi2: f64,
    /// m_π L.
    pub mpi_l: f64,
}

/// What the fit was asked for.
#[derive(Clone, Copy, Debug)]
pub struct Form {
    /// The dependence on m_π.
    pub form: FitForm,
    /// With the finite-volume term.
    pub volume: bool,
    /// Physical pion mass in GeV.
    pub mpi_phys: f64,
}

impl Form {
    /// Coefficient of `ln(m_π²/m_π,phys²)` in the quantity's unit (fm²), 0 for `linear`.
    pub fn log_coefficient(&self) -> f64 {
        let per_gev2 = match self.form {
            FitForm::Linear => return 0.0,
            FitForm::PionRadiusLog => -1.0,
            FitForm::NucleonRadiusLog => -(1.0 + 5.0 * G_A * G_A),
        } / (16.0 * std::f64::consts::PI.powi(2) * F_PI_GEV * F_PI_GEV);
        per_gev2 * HBARC_GEV_FM * HBARC_GEV_FM
    }

    /// The known (parameter-free) part of the model at `x`.
    pub fn offset(&self, x: Abscissa) -> f64 {
        let c = self.log_coefficient();
        if c == 0.0 {
            0.0
        } else {
            c * (x.mpi2 / (self.mpi_phys * self.mpi_phys)).ln()
        }
    }

    /// The design row at `x`.
    pub fn row(&self, x: Abscissa) -> Vec<f64> {
        let mut r = vec![1.0, x.a2, x.mpi2 - self.mpi_phys * self.mpi_phys];
        if self.volume {
            r.push((-x.mpi_l).exp());
        }
        r
    }

    /// The model at `x` with parameters `p`.
    pub fn eval(&self, p: &[f64], x: Abscissa) -> f64 {
        self.offset(x) + self.row(x).iter().zip(p).map(|(r, c)| r * c).sum::<f64>()
    }

    /// Parameter names, in order.
    pub fn param_names(&self) -> Vec<&'static str> {
        let mut n = vec!["c0", "c_a2", "c_mpi2"];
        if self.volume {
            n.push("c_L");
        }
        n
    }
}

/// The parameters refitted on the resamples of one block (one ensemble, or one spacing shift).
#[derive(Clone, Debug)]
pub struct Block {
    /// The ensemble the block varies.
    pub ensemble: String,
    /// The resampling scheme of the block's samples; `None` for a one-sigma shift.
    pub scheme: Option<crate::resample::Scheme>,
    /// Parameters per sample.
    pub params: Vec<Vec<f64>>,
}

/// A finished combination fit.
#[derive(Clone, Debug)]
pub struct Extrapolation {
    /// The form fitted.
    pub form: Form,
    /// Central parameters.
    pub params: Vec<f64>,
    /// Super-jackknife blocks.
    pub blocks: Vec<Block>,
    /// χ² of the central fit.
    pub chi2: f64,
    /// Degrees of freedom.
    pub dof: i64,
    /// p-value (NaN without degrees of freedom).
    pub p_value: f64,
    /// The abscissae of the points at their central spacings.
    pub x: Vec<Abscissa>,
}

impl Extrapolation {
    /// Super-jackknife error of any function of the parameters.
    pub fn error_of(&self, g: impl Fn(&[f64]) -> f64) -> f64 {
        let g0 = g(&self.params);
        let var: f64 = self
            .blocks
            .iter()
            .map(|b| match b.scheme {
                Some(scheme) => {
                    let s: Vec<f64> = b.params.iter().map(|p| g(p)).collect();
                    Resampled::new(g0, s, scheme).variance()
                }
                None => b.params.iter().map(|p| (g(p) - g0).powi(2)).sum(),
            })
            .sum();
        var.sqrt()
    }

    /// The value at the physical point (`c_0`).
    pub fn value(&self) -> f64 {
        self.params[0]
    }

    /// Its error.
    pub fn error(&self) -> f64 {
        self.error_of(|p| p[0])
    }

    /// χ²/dof (NaN without degrees of freedom).
    pub fn chi2_dof(&self) -> f64 {
        if self.dof > 0 {
            self.chi2 / self.dof as f64
        } else {
            f64::NAN
        }
    }
}

fn abscissa(p: &Point, a: f64) -> Abscissa {
    let m = p.mpi_gev(a);
    Abscissa {
        a2: a * a,
        mpi2: m * m,
        mpi_l: p.pion_mass * f64::from(p.l),
    }
}

/// Solve for the parameters with frozen weights, given values and abscissae.
fn solve(form: &Form, x: &[Abscissa], y: &[f64], w: &Weights) -> Result<linear::LinearFit> {
    let np = form.param_names().len();
    let design = DMatrix::from_fn(x.len(), np, |i, j| form.row(x[i])[j]);
    let shifted: Vec<f64> = x.iter().zip(y).map(|(x, y)| y - form.offset(*x)).collect();
    linear::fit(&design, &shifted, w, &vec![None; np])
}

/// Fit `points` with `form`; errors by the super-jackknife described in the module docs.
pub fn extrapolate(points: &[Point], form: Form) -> Result<Extrapolation> {
    let np = form.param_names().len();
    if points.len() < np {
        return Err(Error::analysis(
            "combine",
            format!(
                "{} ensembles for a fit with {np} parameters: expected at least {np}",
                points.len()
            ),
        ));
    }
    let sigmas: Vec<f64> = points.iter().map(|p| p.value.error()).collect();
    if let Some(i) = sigmas.iter().position(|s| !(s.is_finite() && *s > 0.0)) {
        return Err(Error::analysis(
            "combine",
            format!(
                "ensemble {}: the error {} is not positive; cannot weight the fit",
                points[i].ensemble, sigmas[i]
            ),
        ));
    }
    let w = Weights::diagonal(&sigmas);
    let x: Vec<Abscissa> = points
        .iter()
        .map(|p| abscissa(p, p.spacing_fm.value))
        .collect();
    let y: Vec<f64> = points.iter().map(|p| p.value.central).collect();
    let central = solve(&form, &x, &y, &w)?;
    let mut blocks = Vec::new();
    for (e, p) in points.iter().enumerate() {
        let mut params = Vec::with_capacity(p.value.samples.len());
        let mut ys = y.clone();
        for &s in &p.value.samples {
            ys[e] = s;
            params.push(solve(&form, &x, &ys, &w)?.params);
        }
        blocks.push(Block {
            ensemble: p.ensemble.clone(),
            scheme: Some(p.value.scheme),
            params,
        });
        let da = p.spacing_fm.error;
        if da > 0.0 {
            let a = p.spacing_fm.value;
            let mut xs = x.clone();
            xs[e] = abscissa(p, a + da);
            let mut ys = y.clone();
            ys[e] = y[e] * ((a + da) / a).powi(p.fm_power);
            blocks.push(Block {
                ensemble: format!("{} (spacing)", p.ensemble),
                scheme: None,
                params: vec![solve(&form, &xs, &ys, &w)?.params],
            });
        }
    }
    Ok(Extrapolation {
        form,
        params: central.params,
        blocks,
        chi2: central.chi2,
        dof: central.dof,
        p_value: central.p_value,
        x,
    })
}

//! What a Q² fit hands back: the fitted parameters per resample and the quantities at
//! `Q² = 0` (`G(0)`, slope, `r²`), with the units that turn `r²` into fm², and the fit's
//! diagnostics.

use super::shapes::Shape;
use crate::kinematics::HBARC_GEV_FM;
use crate::resample::Resampled;
use serde::Serialize;

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

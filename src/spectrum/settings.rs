//! Settings of the spectrum stage (the `spectrum:` block of a pipeline file).

use super::model::MAX_STATES;
use crate::fit::{FitSettings, Prior};
use crate::resample::covariance::CovarianceOptions;
use crate::Invalid;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// An inclusive range of integers `from..=to`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct IntRange {
    /// First value.
    pub from: usize,
    /// Last value (inclusive).
    pub to: usize,
}

impl IntRange {
    /// The values `from..=to`.
    pub fn values(&self) -> std::ops::RangeInclusive<usize> {
        self.from..=self.to
    }
}

/// Gaussian priors of the two-point fits (constrained curve fitting, Lepage et al. 2002).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct PriorSettings {
    /// Prior on the ground-state energy `E_0` (lattice units); none by default.
    pub ground_energy: Option<Prior>,
    /// Prior on every log-gap `l_n = ln(E_n - E_{n-1})`; default mean `ln 0.5`, width 1
    /// (gaps between about 0.18 and 1.4 within one sigma).
    pub log_gap: Option<Prior>,
    /// Prior on every excited amplitude relative to the ground amplitude, `A_n / A_0`, where
    /// `A_0` is estimated once from the effective mass at `t_min` (frozen across resamples);
    /// default mean 0.5, width 1.
    pub excited_amplitude_ratio: Option<Prior>,
}

impl Default for PriorSettings {
    fn default() -> Self {
        PriorSettings {
            ground_energy: None,
            log_gap: Some(Prior::new(0.5f64.ln(), 1.0)),
            excited_amplitude_ratio: Some(Prior::new(0.5, 1.0)),
        }
    }
}

/// Variational (GEVP) analysis of a correlator matrix.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct GevpSettings {
    /// Reference time `t0` of `C(t) v = lambda C(t0) v`.
    pub t0: usize,
    /// Time at which eigenvectors are reported.
    pub t_ref: usize,
}

/// Settings of the spectrum stage.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct SpectrumSettings {
    /// Range of fit starts `t_min` for the model average (every value is fitted).
    pub t_min: IntRange,
    /// Last time slice of every fit (inclusive); default: `T/2` (periodic) or `n_t - 1`, capped
    /// by the data.
    pub t_max: Option<usize>,
    /// Range of the number of states (1 to 3).
    pub n_states: IntRange,
    /// Priors of the fits.
    pub priors: PriorSettings,
    /// How the covariance of each fit window is estimated from the resamples (once per
    /// window, then frozen for every resample's fit).
    pub covariance: CovarianceOptions,
    /// Symmetric periodic form `A (e^{-Et} + e^{-E(T-t)})` (mesons with periodic time).
    pub periodic: bool,
    /// Time extent `T`; default: the number of time slices in the data. Not a key of the
    /// pipeline file: the pipeline sets it from `ensemble.T`.
    #[serde(skip)]
    #[schemars(skip)]
    pub t_extent: Option<usize>,
    /// Spatial extent `L` (needed for momenta in lattice units and the dispersion check).
    /// Not a key of the pipeline file: the pipeline sets it from `ensemble.L`.
    #[serde(skip)]
    #[schemars(skip)]
    pub l_extent: Option<usize>,
    /// Twist angles `theta` (radians): `p = (2 pi n + theta) / L`. Not a key of the
    /// pipeline file: the pipeline sets it from `ensemble.twist`.
    #[serde(skip)]
    #[schemars(skip)]
    pub twist: Option<[f64; 3]>,
    /// Interpolator label (`smear` column) to fit when the data have several.
    pub smear: Option<String>,
    /// Variational analysis of correlator matrices (channels with `smear` labels `a-b`).
    pub gevp: Option<GevpSettings>,
    /// Levenberg–Marquardt settings; default tolerances 1e-10 (far below any statistical
    /// error, and about half the iterations of machine-precision tolerances).
    pub fit: FitSettings,
}

impl Default for SpectrumSettings {
    fn default() -> Self {
        SpectrumSettings {
            t_min: IntRange { from: 3, to: 8 },
            t_max: None,
            n_states: IntRange { from: 1, to: 2 },
            priors: PriorSettings::default(),
            covariance: CovarianceOptions::default(),
            periodic: false,
            t_extent: None,
            l_extent: None,
            twist: None,
            smear: None,
            gevp: None,
            fit: FitSettings {
                ftol: 1e-10,
                xtol: 1e-10,
                gtol: 1e-10,
                ..FitSettings::default()
            },
        }
    }
}

impl SpectrumSettings {
    /// Check the ranges that need nothing but these settings.
    pub fn validate(&self) -> Result<(), Invalid> {
        let (t_min, n) = (self.t_min, self.n_states);
        if t_min.from > t_min.to {
            return Err(Invalid::new(
                "t_min",
                format!(
                    "from {} is after to {}: expected from <= to",
                    t_min.from, t_min.to
                ),
            ));
        }
        if let Some(t_max) = self.t_max {
            if t_min.to >= t_max {
                return Err(Invalid::new(
                    "t_max",
                    format!(
                        "t_max = {t_max} must be above the largest t_min ({})",
                        t_min.to
                    ),
                ));
            }
        }
        if n.from < 1 || n.to > MAX_STATES || n.from > n.to {
            return Err(Invalid::new(
                "n_states",
                format!(
                    "{}..={} is not valid: expected a range within 1..={MAX_STATES}",
                    n.from, n.to
                ),
            ));
        }
        Ok(())
    }
}

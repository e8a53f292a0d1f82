//! Settings of the spectrum stage (the `spectrum:` block of a pipeline file).

use super::model::MAX_STATES;
use crate::fit::{FitSettings, Prior};
use crate::resample::covariance::CovarianceOptions;
use crate::Invalid;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Parse a momentum key `"nx,ny,nz"` (spaces and parentheses allowed).
pub fn parse_momentum_key(key: &str) -> Option<[i32; 3]> {
    let inner = key.trim().trim_start_matches('(').trim_end_matches(')');
    let v: Vec<i32> = inner
        .split(',')
        .map(|x| x.trim().parse().ok())
        .collect::<Option<_>>()?;
    <[i32; 3]>::try_from(v).ok()
}

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
    /// Prior on the first log-gap that replaces `log_gap` for it at one momentum: set by the
    /// stage for moving frames from the rest frame's spectrum (see
    /// `SpectrumSettings::rest_frame_gap_width`), never read from the pipeline file.
    #[serde(skip)]
    #[schemars(skip)]
    pub first_log_gap: Option<Prior>,
}

impl Default for PriorSettings {
    fn default() -> Self {
        PriorSettings {
            ground_energy: None,
            log_gap: Some(Prior::new(0.5f64.ln(), 1.0)),
            excited_amplitude_ratio: Some(Prior::new(0.5, 1.0)),
            first_log_gap: None,
        }
    }
}

/// How the rest-frame `ground_energy` prior reaches the moving frames.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum PriorFrames {
    /// Mean `sqrt(m^2 + p^2)`, width scaled by `m / E` (needs `l_extent`).
    #[default]
    ContinuumDispersion,
    /// Mean from `sinh^2(E/2) = sinh^2(m/2) + sum sin^2(p_i/2)`, width by `dE/dm` (needs
    /// `l_extent`).
    LatticeDispersion,
    /// Only at rest; moving frames get no ground-energy prior unless listed per momentum.
    RestOnly,
}

/// Which GEVP solution the principal-correlator energy fits use.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum GevpSolutionKind {
    /// The eigenproblem solved at every `t`: principal correlators `lambda_n(t, t0)`.
    #[default]
    PerT,
    /// The eigenvectors of `t_ref` at every `t`: `v_n(t_ref)^T C(t) v_n(t_ref)`.
    Fixed,
}

/// Variational (GEVP) analysis of correlator matrices between the operators of the
/// `sink_op` / `source_op` columns (docs/methods.md §2). The rest of the analysis (spectrum
/// fits, ratios, form factors) then runs on the optimised ground-state operator: every
/// two- and three-point function projected with the ground-state eigenvector of `t_ref`.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct GevpSettings {
    /// Reference time `t0` of `C(t) v = lambda C(t0) v`; `C(t0)` must be positive definite.
    pub t0: usize,
    /// Time whose eigenvectors define the optimised operators (fixed-vector solution);
    /// must be later than `t0`.
    pub t_ref: usize,
    /// Which solution the energy fits to the principal correlators use (`per_t` or
    /// `fixed`); both are written to the tables.
    #[serde(default)]
    pub energies_from: GevpSolutionKind,
    /// An operator of the basis whose diagonal correlators are analysed too, for the
    /// side-by-side comparison with the optimised operator (ratio estimates and form
    /// factors); none by default.
    #[serde(default)]
    pub compare_operator: Option<String>,
}

impl GevpSettings {
    /// Check `t0 < t_ref`.
    pub fn validate(&self) -> Result<(), Invalid> {
        if self.t_ref <= self.t0 {
            return Err(Invalid::new(
                "gevp.t_ref",
                format!("t_ref = {} must be later than t0 = {}", self.t_ref, self.t0),
            ));
        }
        if self.compare_operator.as_deref() == Some("") {
            return Err(Invalid::new(
                "gevp.compare_operator",
                "an empty operator label: expected an operator of the data's sink_op column",
            ));
        }
        Ok(())
    }
}

/// Settings of the spectrum stage.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct SpectrumSettings {
    /// Range of fit starts `t_min` for the model average (every value is fitted).
    pub t_min: IntRange,
    /// Last time slice of every fit (inclusive); default: `T/2` (periodic) or `n_t - 1`, capped
    /// by the data. At each momentum it is lowered further to the last time slice before the
    /// signal dies (see `max_relative_error`) unless `t_max_by_momentum` names the momentum.
    pub t_max: Option<usize>,
    /// The signal counts as lost from the first time slice (at or after `t_min.from`) whose
    /// central value is not positive or whose relative error exceeds this; the fits at that
    /// momentum stop before it.
    pub max_relative_error: f64,
    /// `t_max` per momentum, keyed `"nx,ny,nz"` (e.g. `"1,0,0"`); overrides the choice from
    /// the signal.
    pub t_max_by_momentum: BTreeMap<String, usize>,
    /// How the rest-frame `priors.ground_energy` is carried to moving frames.
    pub prior_frames: PriorFrames,
    /// Ground-energy priors per momentum, keyed `"nx,ny,nz"`; they replace the carried prior.
    pub ground_energy_by_momentum: BTreeMap<String, Prior>,
    /// Moving frames take the prior of their first log-gap `ln(E_1 - E_0)` from the rest
    /// frame's fitted spectrum: both rest-frame energies averaged over its multi-state fits
    /// (docs/methods.md §2) carried by
    /// the dispersion relation of `prior_frames` (continuum unless `lattice_dispersion`), with
    /// this width in the log-gap, the rest-frame log-gap error added in quadrature. Default
    /// 0.3 (a gap known to about 35 %, room for states whose dispersion differs); `null` keeps
    /// `priors.log_gap` at every momentum, as does `prior_frames: rest_only`. Used only where
    /// the rest frame has a resolved multi-state fit in its average; the run notes the carried
    /// gaps.
    pub rest_frame_gap_width: Option<f64>,
    /// Range of the number of states (1 to 3).
    pub n_states: IntRange,
    /// Priors of the fits.
    pub priors: PriorSettings,
    /// How the covariance of each fit window is estimated from the resamples (once per
    /// window, then frozen for every resample's fit). Default: the full covariance where
    /// there are at least five resamples per point of the widest window at a momentum,
    /// otherwise diagonal weights (a full covariance from fewer samples is too noisy: docs/methods.md §2).
    pub covariance: Option<CovarianceOptions>,
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
    /// Twist angles `theta` (radians): `p = (2 pi n + theta) / L`, at every momentum that
    /// `twists` does not name. Not a key of the pipeline file: the pipeline sets it from the
    /// sink twist (`ensemble.twist_sink`, else `ensemble.twist`).
    #[serde(skip)]
    #[schemars(skip)]
    pub twist: Option<[f64; 3]>,
    /// The twist of the two-point function at each momentum, when sink and source differ
    /// (`kinematics::twists_by_side`). Not a key of the pipeline file: the pipeline fills it
    /// from the three-point channels.
    #[serde(skip)]
    #[schemars(skip)]
    pub twists: BTreeMap<[i32; 3], [f64; 3]>,
    /// The dispersion relation that turns a twisted fit at momentum (0,0,0) into the mass
    /// (`m² = E² - p²` or its lattice form). Not a key of the pipeline file: the pipeline sets
    /// it from `decomposition.energies` (lattice there, lattice here; continuum otherwise).
    #[serde(skip)]
    #[schemars(skip)]
    pub mass_dispersion: crate::kinematics::Dispersion,
    /// Interpolator label (`smear` column) to fit when the data have several.
    pub smear: Option<String>,
    /// Variational analysis of correlator matrices (channels with `sink_op` / `source_op`
    /// labels); the optimised operators then replace the single ones in every later stage.
    pub gevp: Option<GevpSettings>,
    /// Levenberg–Marquardt settings; default tolerances 1e-10 (far below any statistical
    /// error, and about half the iterations of machine-precision tolerances). A block that
    /// leaves out a tolerance keeps 1e-10 for it.
    #[serde(deserialize_with = "spectrum_fit")]
    #[schemars(with = "SpectrumFit")]
    pub fit: FitSettings,
}

/// Tolerance of the spectrum fits when none is given.
const SPECTRUM_TOL: f64 = 1e-10;

/// The spectrum stage's `fit` block: as the general fit settings, with the stage's own tolerances as
/// the defaults of a partial block (so `fit: {patience: 100}` keeps 1e-10).
#[derive(Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
struct SpectrumFit {
    /// Relative reduction of the sum of squares at which to stop.
    #[serde(default = "spectrum_tol")]
    ftol: f64,
    /// Relative change of the parameters at which to stop.
    #[serde(default = "spectrum_tol")]
    xtol: f64,
    /// Orthogonality of residuals and Jacobian columns at which to stop.
    #[serde(default = "spectrum_tol")]
    gtol: f64,
    /// At most `patience * (n_params + 1)` residual evaluations.
    #[serde(default = "default_patience")]
    patience: usize,
    /// Initial step bound factor (MINPACK `factor`).
    #[serde(default = "default_stepbound")]
    stepbound: f64,
}

fn spectrum_tol() -> f64 {
    SPECTRUM_TOL
}
fn default_patience() -> usize {
    FitSettings::default().patience
}
fn default_stepbound() -> f64 {
    FitSettings::default().stepbound
}

fn spectrum_fit<'de, D: serde::Deserializer<'de>>(d: D) -> Result<FitSettings, D::Error> {
    let f = SpectrumFit::deserialize(d)?;
    Ok(FitSettings {
        ftol: f.ftol,
        xtol: f.xtol,
        gtol: f.gtol,
        patience: f.patience,
        stepbound: f.stepbound,
    })
}

impl Default for SpectrumSettings {
    fn default() -> Self {
        SpectrumSettings {
            t_min: IntRange { from: 3, to: 8 },
            t_max: None,
            max_relative_error: 1.0,
            t_max_by_momentum: BTreeMap::new(),
            prior_frames: PriorFrames::default(),
            ground_energy_by_momentum: BTreeMap::new(),
            rest_frame_gap_width: Some(0.3),
            n_states: IntRange { from: 1, to: 2 },
            priors: PriorSettings::default(),
            covariance: None,
            periodic: false,
            t_extent: None,
            l_extent: None,
            twist: None,
            twists: BTreeMap::new(),
            mass_dispersion: crate::kinematics::Dispersion::Continuum,
            smear: None,
            gevp: None,
            fit: FitSettings {
                ftol: SPECTRUM_TOL,
                xtol: SPECTRUM_TOL,
                gtol: SPECTRUM_TOL,
                ..FitSettings::default()
            },
        }
    }
}

impl SpectrumSettings {
    /// The twist angles of the two-point function at integer momentum `n`.
    pub fn twist_at(&self, n: [i32; 3]) -> [f64; 3] {
        self.twists
            .get(&n)
            .copied()
            .or(self.twist)
            .unwrap_or_default()
    }

    /// The lattice momentum `(2 pi n + theta) / L` of the two-point function at `n` (`None`
    /// without `l_extent`).
    pub fn lattice_momentum(&self, n: [i32; 3]) -> Option<[f64; 3]> {
        let l = self.l_extent?;
        Some(crate::kinematics::lattice_momentum(n, l, self.twist_at(n)))
    }

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
        if !(self.max_relative_error.is_finite() && self.max_relative_error > 0.0) {
            return Err(Invalid::new(
                "max_relative_error",
                format!(
                    "{} is not valid: expected a positive number",
                    self.max_relative_error
                ),
            ));
        }
        if let Some(w) = self.rest_frame_gap_width {
            if !(w.is_finite() && w > 0.0) {
                return Err(Invalid::new(
                    "rest_frame_gap_width",
                    format!("{w} is not valid: expected a positive width (or null for none)"),
                ));
            }
        }
        let keys = self.t_max_by_momentum.keys();
        let keys = keys.chain(self.ground_energy_by_momentum.keys());
        if let Some(k) = keys.into_iter().find(|k| parse_momentum_key(k).is_none()) {
            return Err(Invalid::new(
                "t_max_by_momentum",
                format!("momentum key `{k}` is not valid: expected \"nx,ny,nz\", e.g. \"1,0,0\""),
            ));
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
        if let Some(g) = &self.gevp {
            g.validate()?;
        }
        Ok(())
    }
}

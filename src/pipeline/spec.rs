//! The pipeline file as plain serde types, sections in data-flow order.
//!
//! This is the first of the two settings steps: a faithful, typed image of the YAML with
//! defaults filled in and unknown keys refused (`deny_unknown_fields`). Ranges, file
//! existence and cross-references are checked afterwards when the validated
//! [`Plan`](super::plan::Plan) is built. The JSON Schema in `schemas/pipeline.schema.json`
//! is generated from these types.

use crate::kinematics::flavor::FlavorCombo;
use crate::kinematics::{DecompositionSettings, Dispersion, FormFactor, Hadron};
use crate::q2::Q2FitSettings;
use crate::ratio::{Estimator, RatioSettings, ZFactors};
use crate::spectrum::SpectrumSettings;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::PathBuf;

/// A whole analysis: ensemble, data, then one section per stage in data-flow order.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PipelineSpec {
    /// The lattice ensemble and the hadron studied.
    pub ensemble: Ensemble,
    /// Where the correlator tables are.
    pub data: DataSpec,
    /// Binning and the resampling scheme used for every error.
    #[serde(default)]
    pub resampling: ResamplingSpec,
    /// Two-point fits: energies and excited-state gaps per momentum.
    #[serde(default)]
    pub spectrum: SpectrumSpec,
    /// The three-/two-point ratio.
    #[serde(default)]
    pub ratio: RatioSpec,
    /// Excited-state control: plateau, summation, two-state and the final choice.
    #[serde(default)]
    pub excited_states: ExcitedStatesSpec,
    /// Renormalization constants per current kind.
    #[serde(default)]
    pub renormalization: RenormalizationSpec,
    /// Form-factor decomposition of the ratio's large-time limits.
    #[serde(default)]
    pub decomposition: DecompositionSpec,
    /// Q² fits per form factor.
    #[serde(default)]
    pub q2_fits: Q2FitsSpec,
    /// The run directory and the plots to draw.
    #[serde(default)]
    pub output: OutputSpec,
    /// Stop after this stage (the later stages are skipped; tables so far are written).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stop_after: Option<Stage>,
}

/// The stages of a run, in order.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize, JsonSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Stage {
    /// Read and bin the correlator tables, build the resample plan.
    Data,
    /// Two-point fits.
    Spectrum,
    /// Ratio, excited-state methods, cross-check, renormalization.
    Ratio,
    /// Form-factor decomposition per method.
    Decomposition,
    /// Q² fits.
    Q2Fits,
}

impl Stage {
    /// Every stage in data-flow order.
    pub const ALL: [Stage; 5] = [
        Stage::Data,
        Stage::Spectrum,
        Stage::Ratio,
        Stage::Decomposition,
        Stage::Q2Fits,
    ];

    /// The section name in the pipeline file.
    pub fn name(self) -> &'static str {
        match self {
            Stage::Data => "data",
            Stage::Spectrum => "spectrum",
            Stage::Ratio => "ratio",
            Stage::Decomposition => "decomposition",
            Stage::Q2Fits => "q2_fits",
        }
    }
}

/// The lattice ensemble.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Ensemble {
    /// A short name shown in the report.
    #[serde(default)]
    pub label: String,
    /// Spatial extent in lattice sites.
    #[serde(rename = "L")]
    pub l: u32,
    /// Temporal extent in lattice sites.
    #[serde(rename = "T")]
    pub t: u32,
    /// Lattice spacing in fm.
    pub spacing_fm: f64,
    /// Pion mass in lattice units (sets the z-expansion threshold).
    pub pion_mass: f64,
    /// The hadron's spin: `spin0` (one vector form factor `F`) or `spin1half` (Sachs,
    /// axial, scalar, pseudoscalar, tensor form factors).
    pub hadron: Hadron,
}

/// The correlator tables.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DataSpec {
    /// Two-point table (CSV), relative to the pipeline file.
    pub twopt: PathBuf,
    /// Three-point table (CSV), relative to the pipeline file.
    pub threept: PathBuf,
    /// Keep only the configurations present in both tables (dropped ones are reported);
    /// otherwise a mismatch is an error.
    #[serde(default)]
    pub keep_common_configs: bool,
}

/// Resampling scheme.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum ResamplingMethod {
    /// Delete-one jackknife on bins.
    Jackknife,
    /// Bootstrap on bins, seeded.
    Bootstrap,
}

/// Binning and resampling.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ResamplingSpec {
    /// Jackknife or bootstrap.
    #[serde(default = "default_method")]
    pub method: ResamplingMethod,
    /// Consecutive configurations per bin (trailing ones are dropped and reported).
    #[serde(default = "one")]
    pub bin_size: usize,
    /// Number of bootstrap samples (ignored for the jackknife).
    #[serde(default = "default_samples")]
    pub samples: usize,
    /// Seed of the bootstrap draws.
    #[serde(default = "default_seed")]
    pub seed: u64,
}

impl Default for ResamplingSpec {
    fn default() -> Self {
        ResamplingSpec {
            method: default_method(),
            bin_size: 1,
            samples: default_samples(),
            seed: default_seed(),
        }
    }
}

fn default_method() -> ResamplingMethod {
    ResamplingMethod::Jackknife
}
fn one() -> usize {
    1
}
fn default_samples() -> usize {
    200
}
fn default_seed() -> u64 {
    20_240_601
}
fn yes() -> bool {
    true
}

/// Two-point fits: the section switch plus the spectrum stage's own settings (`t_min`,
/// `t_max`, `n_states`, `priors`, `periodic`, `energies`, ...).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct SpectrumSpec {
    /// Run this stage (and everything after it).
    #[serde(default = "yes")]
    pub enabled: bool,
    /// Settings of the two-point fits. `l_extent` and `t_extent` default to the ensemble's
    /// `L` and `T`.
    #[serde(flatten)]
    pub fits: SpectrumSettings,
}

impl Default for SpectrumSpec {
    fn default() -> Self {
        SpectrumSpec {
            enabled: true,
            fits: SpectrumSettings::default(),
        }
    }
}

/// The three-/two-point ratio: which data enter it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct RatioSpec {
    /// Run this stage (and everything after it).
    #[serde(default = "yes")]
    pub enabled: bool,
    /// Source–sink separations to use (default: every one in the data).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tsep: Option<Vec<u32>>,
    /// Currents to analyse (default: every one in the data), e.g. `[V4, V1, V2, V3]`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub currents: Option<Vec<String>>,
    /// Flavour combination formed per configuration before the ratio, e.g.
    /// `{label: u-d, terms: [{flavor: u, weight: 1}, {flavor: d, weight: -1}]}`
    /// (default: the data as they are).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub flavor: Option<FlavorCombo>,
}

impl Default for RatioSpec {
    fn default() -> Self {
        RatioSpec {
            enabled: true,
            tsep: None,
            currents: None,
            flavor: None,
        }
    }
}

/// Excited-state control: the methods reported, and the ratio stage's own settings
/// (`tau_cut`, `summation_tsep_min`, `two_state_tsep_min`, `final_method`, ...).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct ExcitedStatesSpec {
    /// Estimators whose results are tabulated, decomposed and cross-checked: `plateau`
    /// (every separation) or `plateau_tsep<N>`, `summation`, `two_state`.
    #[serde(default = "all_methods")]
    pub methods: Vec<Estimator>,
    /// Settings of the ratio stage's fits.
    #[serde(flatten)]
    pub fits: RatioSettings,
}

impl Default for ExcitedStatesSpec {
    fn default() -> Self {
        ExcitedStatesSpec {
            methods: all_methods(),
            fits: RatioSettings::default(),
        }
    }
}

fn all_methods() -> Vec<Estimator> {
    vec![
        Estimator::Plateau { tsep: None },
        Estimator::Summation,
        Estimator::TwoState,
    ]
}

/// Renormalization constants per current kind (absent = 1 exactly), e.g.
/// `vector: {value: 0.72, error: 0.01}`.
pub type RenormalizationSpec = ZFactors;

/// Where the energies of the kinematic factors come from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum EnergySource {
    /// Fitted energy at every momentum.
    Fit,
    /// Rest mass plus a dispersion relation.
    Dispersion,
}

/// Form-factor decomposition.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct DecompositionSpec {
    /// Run this stage (and everything after it).
    #[serde(default = "yes")]
    pub enabled: bool,
    /// Energies from the two-point fits or from the rest mass and a dispersion relation.
    #[serde(default = "default_energies")]
    pub energies: EnergySource,
    /// The dispersion relation used when `energies: dispersion`.
    #[serde(default = "default_dispersion")]
    pub dispersion: Dispersion,
    /// Twist angle `theta` per direction (radians) of sink and source momenta.
    #[serde(default)]
    pub twist: [f64; 3],
    /// Weights, Q² tolerance and per-current phases of the least-squares solve.
    #[serde(flatten)]
    pub solve: DecompositionSettings,
}

impl Default for DecompositionSpec {
    fn default() -> Self {
        DecompositionSpec {
            enabled: true,
            energies: default_energies(),
            dispersion: default_dispersion(),
            twist: [0.0; 3],
            solve: DecompositionSettings::default(),
        }
    }
}

fn default_dispersion() -> Dispersion {
    Dispersion::Lattice
}

fn default_energies() -> EnergySource {
    EnergySource::Fit
}

/// Q² fits.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Q2FitsSpec {
    /// Run this stage.
    #[serde(default = "yes")]
    pub enabled: bool,
    /// The fits per form factor (`GE`, `GM`, `GA`, `GP`, `GS`, `G5`, `GT`, `F`), each a list
    /// of shapes, e.g. `GE: [{model: dipole}, {model: z-expansion, t_cut: {pion_mass: 0.14,
    /// n_pions: 2}, kmax: 3}]`. Q² is in lattice units. A form factor not listed is not
    /// fitted. Each method's form factors are fitted (plateau: the largest `tsep` only).
    #[serde(default)]
    pub form_factors: BTreeMap<FormFactor, Vec<Q2FitSettings>>,
}

impl Default for Q2FitsSpec {
    fn default() -> Self {
        Q2FitsSpec {
            enabled: true,
            form_factors: BTreeMap::new(),
        }
    }
}

/// A plot of the report.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize, JsonSchema,
)]
#[serde(rename_all = "snake_case")]
pub enum Plot {
    /// Effective mass per momentum with the fitted energy.
    EffectiveMass,
    /// Fitted energies against the dispersion relation.
    Dispersion,
    /// The ratio versus `tau` per `tsep`, with the plateau / two-state bands.
    Ratio,
    /// The summed ratio versus `tsep` with the linear fit.
    Summation,
    /// Form factors versus Q² per method, with the Q² fits.
    FormFactors,
}

/// The run directory and the plots.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OutputSpec {
    /// Run directory, relative to the pipeline file (`--out` overrides it).
    #[serde(default = "default_dir")]
    pub dir: PathBuf,
    /// Plots to draw.
    #[serde(default = "all_plots")]
    pub plots: Vec<Plot>,
}

impl Default for OutputSpec {
    fn default() -> Self {
        OutputSpec {
            dir: default_dir(),
            plots: all_plots(),
        }
    }
}

fn default_dir() -> PathBuf {
    PathBuf::from("runs/out")
}
fn all_plots() -> Vec<Plot> {
    vec![
        Plot::EffectiveMass,
        Plot::Dispersion,
        Plot::Ratio,
        Plot::Summation,
        Plot::FormFactors,
    ]
}

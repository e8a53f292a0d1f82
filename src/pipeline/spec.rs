//! The pipeline file as plain serde types, sections in data-flow order.
//!
//! This is the first of the two settings steps: a faithful, typed image of the YAML with
//! defaults filled in and unknown keys refused (`deny_unknown_fields`). Ranges, file
//! existence and cross-references are checked afterwards when the validated
//! [`Plan`](super::plan::Plan) is built. The JSON Schema in `schemas/pipeline.schema.json`
//! is generated from these types.

use crate::data::flavor::FlavorCombo;
use crate::data::Current;
use crate::kinematics::ZFactors;
use crate::kinematics::{DecompositionSettings, FormFactor, Hadron};
use crate::q2::Q2FitSettings;
use crate::ratio::{Estimator, RatioSettings};
use crate::spectrum::SpectrumSettings;
use crate::Invalid;
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
    pub spectrum: SpectrumSettings,
    /// Which three-point data enter the ratio: separations, currents, flavour combination.
    #[serde(default)]
    pub ratio: Selection,
    /// Excited-state control: plateau, summation, two-state and the final choice.
    #[serde(default)]
    pub excited_states: RatioSettings,
    /// Renormalization constants per current kind.
    #[serde(default)]
    pub renormalization: RenormalizationSpec,
    /// Form-factor decomposition of the ratio's large-time limits.
    #[serde(default)]
    pub decomposition: DecompositionSettings,
    /// Q² fits per form factor.
    #[serde(default)]
    pub q2_fits: Q2FitsSpec,
    /// How the final numbers are made from the analysis variants.
    #[serde(default)]
    pub final_value: FinalValueSpec,
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
    /// Temporal extent in lattice sites. When given it must equal the two-point data's time
    /// extent (a check against a wrong lattice); when omitted it is taken from the data.
    #[serde(rename = "T", default, skip_serializing_if = "Option::is_none")]
    pub t: Option<u32>,
    /// Lattice spacing in fm.
    pub spacing_fm: f64,
    /// Pion mass in lattice units (sets the z-expansion threshold).
    pub pion_mass: f64,
    /// The hadron's spin: `spin0` (one vector form factor `F`) or `spin1half` (Sachs,
    /// axial, scalar, pseudoscalar, tensor form factors).
    pub hadron: Hadron,
    /// Twist angle `theta` per direction (radians) of the boundary condition, the same at
    /// source and sink: momenta are `p = (2 pi n + theta) / L`.
    #[serde(default)]
    pub twist: [f64; 3],
    /// Twist angles of the sink momenta when they differ from the source's (radians; default
    /// `twist`). The two-point function at a momentum carries the twist of the side the
    /// three-point channels use it on: the sink twist at every sink momentum `p_f`, the source
    /// twist at every source momentum `p_i = p_f - q`, the sink twist at momenta no channel
    /// uses. The two-point data have no column saying which twist a function carries, so a
    /// momentum used on both sides with different twists is refused. When (0,0,0) carries a
    /// twist, the mass comes from its fit per resample by the inverted dispersion relation
    /// (`m² = E² - p²`; the lattice form with `decomposition.energies: lattice`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub twist_sink: Option<[f64; 3]>,
    /// Twist angles of the source momenta when they differ from the sink's (radians; default
    /// `twist`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub twist_source: Option<[f64; 3]>,
}

/// The correlators: two CSV tables (`twopt` and `threept`) or an HDF5 source (`hdf5`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DataSpec {
    /// Two-point table (CSV), relative to the pipeline file.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub twopt: Option<PathBuf>,
    /// Three-point table (CSV), relative to the pipeline file.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threept: Option<PathBuf>,
    /// HDF5 files instead of the CSV tables (needs a build with the `hdf5` feature).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hdf5: Option<crate::io::hdf5::Hdf5Source>,
    /// Keep only the configurations present in both tables (dropped ones are reported);
    /// otherwise a mismatch is an error.
    #[serde(default)]
    pub keep_common_configs: bool,
    /// For tables with operator labels (`sink_op`, `source_op`) analysed without the
    /// variational method: the operator whose diagonal correlators (sink and source both
    /// this operator) are used. Tables with operator labels need this or `spectrum.gevp`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub operator: Option<String>,
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
    /// Seed of the bootstrap draws (0 to 2^64 - 1).
    #[serde(default = "default_seed", deserialize_with = "crate::io::seed::seed")]
    pub seed: u64,
    /// Autocorrelation left in the bins: its tau_int is measured on the binned data (Gamma
    /// method, pooled over every time slice of every channel) and every resampled deviation
    /// is inflated by sqrt(2 tau_int) when it exceeds 1/2 by more than its error (`auto`),
    /// whenever it exceeds 1/2 (`always`, the default), or `never`.
    #[serde(default)]
    pub autocorrelation_inflation: crate::resample::inflation::Inflation,
}

impl Default for ResamplingSpec {
    fn default() -> Self {
        ResamplingSpec {
            method: default_method(),
            bin_size: 1,
            samples: default_samples(),
            seed: default_seed(),
            autocorrelation_inflation: Default::default(),
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

/// Which three-point data enter the ratio (the `ratio:` section).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Selection {
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

/// Renormalization constants per current kind (absent = 1 exactly), e.g.
/// `vector: {value: 0.72, error: 0.01}`.
pub type RenormalizationSpec = ZFactors;

/// Q² fits.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Q2FitsSpec {
    /// The fits per form factor (`GE`, `GM`, `GA`, `GP`, `GS`, `G5`, `GT`, `F`), each a list
    /// of shapes, e.g. `GE: [{model: dipole}, {model: z-expansion, t_cut: {pion_mass: 0.14,
    /// n_pions: 2}, kmax: 3}]`. Q² is in lattice units. A form factor not listed is not
    /// fitted. Each method's form factors are fitted (plateau: the largest `tsep` only).
    #[serde(default)]
    pub form_factors: BTreeMap<FormFactor, Vec<Q2FitSettings>>,
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
    /// The analysis variants behind each final value, with their weights.
    FinalVariants,
    /// GEVP effective energies per state with the fitted energies (variational runs).
    GevpEnergies,
    /// GEVP eigenvector components versus t (variational runs).
    GevpVectors,
    /// The error of representative means against the bin size, with `sqrt(2 tau_int)`.
    Binning,
}

/// How the final numbers are made: by default the two-state result (else summation, else
/// plateaus) averaged over the Q² models, the differences quoted as systematic errors
/// (`error_budget`); `pin` fixes one estimator instead.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct FinalValueSpec {
    /// Take the final numbers from this estimator only (`plateau` means the largest `tsep`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pin: Option<Estimator>,
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
        Plot::FinalVariants,
        Plot::GevpEnergies,
        Plot::GevpVectors,
        Plot::Binning,
    ]
}

impl Ensemble {
    /// Check the lattice: positive extents and spacing, finite twists.
    pub fn validate(&self) -> Result<(), Invalid> {
        if self.l == 0 {
            return Err(Invalid::new("L", "L must be a positive number of sites"));
        }
        if let Some(t) = self.t.filter(|&t| t < 4) {
            return Err(Invalid::new(
                "T",
                format!("T = {t} is too small; expected at least 4 time slices"),
            ));
        }
        for (key, v, what) in [
            ("spacing_fm", self.spacing_fm, "the lattice spacing in fm"),
            (
                "pion_mass",
                self.pion_mass,
                "the pion mass in lattice units",
            ),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return Err(Invalid::new(
                    key,
                    format!("{v} is not valid: expected a positive number ({what})"),
                ));
            }
        }
        for (key, twist) in [
            ("twist", self.twist),
            ("twist_sink", self.sink_twist()),
            ("twist_source", self.source_twist()),
        ] {
            if let Some(i) = twist.iter().position(|t| !t.is_finite()) {
                return Err(Invalid::new(
                    format!("{key}[{i}]"),
                    "twist angles must be finite numbers (radians)",
                ));
            }
        }
        Ok(())
    }

    /// The twist angles of the sink momenta (`twist_sink`, else `twist`).
    pub fn sink_twist(&self) -> [f64; 3] {
        self.twist_sink.unwrap_or(self.twist)
    }

    /// The twist angles of the source momenta (`twist_source`, else `twist`).
    pub fn source_twist(&self) -> [f64; 3] {
        self.twist_source.unwrap_or(self.twist)
    }
}

impl ResamplingSpec {
    /// Check the bin size and the number of bootstrap samples.
    pub fn validate(&self) -> Result<(), Invalid> {
        if self.bin_size == 0 {
            return Err(Invalid::new(
                "bin_size",
                "bin_size 0 is not valid: expected 1 or more configurations per bin",
            ));
        }
        if self.method == ResamplingMethod::Bootstrap && self.samples < 2 {
            return Err(Invalid::new(
                "samples",
                format!(
                    "{} bootstrap samples are too few: expected at least 2 (typically 200 or more)",
                    self.samples
                ),
            ));
        }
        Ok(())
    }
}

impl Selection {
    /// Check the lists and names (whether they are in the data is checked on reading).
    pub fn validate(&self) -> Result<(), Invalid> {
        if self.tsep.as_ref().is_some_and(Vec::is_empty) {
            return Err(Invalid::new(
                "tsep",
                "the list of tsep values is empty; leave the key out to use every tsep in the data",
            ));
        }
        for (i, c) in self.currents.iter().flatten().enumerate() {
            if Current::parse(c).is_none() {
                return Err(Invalid::new(format!("currents[{i}]"), Current::unknown(c)));
            }
        }
        if let Some(f) = &self.flavor {
            if f.terms.is_empty() {
                return Err(Invalid::new(
                    "flavor.terms",
                    format!("the flavour combination `{}` has no terms", f.label),
                ));
            }
        }
        Ok(())
    }
}

impl OutputSpec {
    /// Check that there is a run directory.
    pub fn validate(&self) -> Result<(), Invalid> {
        if self.dir.as_os_str().is_empty() {
            return Err(Invalid::new(
                "dir",
                "the run directory is empty: expected a path",
            ));
        }
        Ok(())
    }
}

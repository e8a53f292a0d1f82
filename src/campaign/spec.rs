//! The campaign file's types: plain serde types from which the JSON Schema
//! (`schemas/campaign.schema.json`) is generated, so editors complete and check campaign files.
//!
//! A campaign names one base pipeline, the ensembles it is run on (each with its data and
//! lattice parameters, plus `--set`-style overrides of its own), optional variant axes whose
//! product gives the analysis variants, the combination fits to make, and the batch
//! scheduler's settings.

use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

/// A campaign file.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CampaignSpec {
    /// A short name shown in reports and used for Slurm job names.
    pub name: String,
    /// The base pipeline file, relative to the campaign file.
    pub pipeline: PathBuf,
    /// The campaign directory (one run directory per ensemble and variant under `runs/`,
    /// task records under `tasks/`, the combination under `combined/`), relative to the
    /// campaign file.
    pub output: PathBuf,
    /// Runs computed at once by `campaign run` (each with one worker thread).
    #[serde(default = "default_parallel")]
    pub parallel: usize,
    /// The ensembles.
    pub ensembles: Vec<EnsembleEntry>,
    /// Variant axes; their product gives the analysis variants (none: one variant `base`).
    #[serde(default)]
    pub variants: Vec<VariantAxis>,
    /// The combination: quantities to fit against a² and m_π².
    #[serde(default)]
    pub combine: CombineSpec,
    /// Batch-scheduler settings for `campaign slurm`.
    #[serde(default)]
    pub slurm: SlurmSpec,
}

fn default_parallel() -> usize {
    1
}

/// One ensemble of the campaign.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct EnsembleEntry {
    /// A short name (letters, digits, `-`, `_`), used in directory names.
    pub name: String,
    /// Two-point table (CSV), relative to the campaign file.
    pub twopt: PathBuf,
    /// Three-point table (CSV), relative to the campaign file.
    pub threept: PathBuf,
    /// Spatial extent in lattice sites.
    #[serde(rename = "L")]
    pub l: u32,
    /// Temporal extent in lattice sites.
    #[serde(rename = "T")]
    pub t: u32,
    /// Lattice spacing in fm with its error.
    pub spacing_fm: ValueError,
    /// Pion mass in lattice units.
    pub pion_mass: f64,
    /// Further overrides of the base pipeline for this ensemble, each `KEY=VALUE` as with
    /// `formfactory run --set`.
    #[serde(default)]
    pub set: Vec<String>,
}

/// A value with its one-sigma error.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ValueError {
    /// Central value.
    pub value: f64,
    /// One-sigma error (0 for none).
    #[serde(default)]
    pub error: f64,
}

/// One variant axis: alternatives of which each run takes one.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct VariantAxis {
    /// Axis name (e.g. `fit_window`).
    pub axis: String,
    /// The alternatives; the first is the base choice.
    pub options: Vec<VariantOption>,
}

/// One alternative on a variant axis.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct VariantOption {
    /// Label (letters, digits, `-`, `_`), part of the variant's name.
    pub label: String,
    /// Overrides of the base pipeline, each `KEY=VALUE` as with `formfactory run --set`.
    #[serde(default)]
    pub set: Vec<String>,
}

/// The combination fits.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct CombineSpec {
    /// The physical point the fits are evaluated at.
    #[serde(default)]
    pub physical_point: PhysicalPoint,
    /// The quantities to combine.
    #[serde(default)]
    pub quantities: Vec<QuantitySpec>,
}

/// Where the fits are evaluated: a = 0, L = infinity and this pion mass.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PhysicalPoint {
    /// Pion mass in GeV (default 0.135, the neutral pion).
    #[serde(default = "default_pion_gev")]
    pub pion_mass_gev: f64,
}

impl Default for PhysicalPoint {
    fn default() -> Self {
        PhysicalPoint {
            pion_mass_gev: default_pion_gev(),
        }
    }
}

fn default_pion_gev() -> f64 {
    0.135
}

/// One quantity to combine: a row of every run's `derived` table, or a form factor
/// interpolated to a chosen Q².
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct QuantitySpec {
    /// The `quantity` of the derived table (`F(0)`, `r2_GE`, `GA(0)`, …), or a form-factor
    /// name (`GE`, `F`, …) together with `q2_gev2`.
    pub quantity: String,
    /// Excited-state method label of the rows to take (`two_state`, `summation`, …; `-` and
    /// `_` are taken as the same).
    #[serde(default = "default_method")]
    pub method: String,
    /// Q² model of the rows to take (`dipole`, `z-expansion`); ignored with `q2_gev2`.
    #[serde(default = "default_model")]
    pub model: String,
    /// Take the form factor `quantity` at this Q² (GeV²), interpolated between the two
    /// nearest Q² shells of each run.
    #[serde(default)]
    pub q2_gev2: Option<f64>,
    /// The fit form.
    #[serde(default)]
    pub form: FitForm,
    /// Add a finite-volume term `c_L exp(-m_π L)`.
    #[serde(default)]
    pub volume: bool,
}

fn default_method() -> String {
    crate::ratio::Estimator::TwoState.to_string()
}

fn default_model() -> String {
    "dipole".into()
}

/// The dependence on a² and m_π² fitted.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum FitForm {
    /// `c_0 + c_a a² + c_m (m_π² - m_π,phys²)`.
    #[default]
    Linear,
    /// Pion charge radius at one loop (Gasser & Leutwyler 1984): the linear form plus
    /// `-1/(16 π² F²) ln(m_π²/m_π,phys²)`.
    PionRadiusLog,
    /// Nucleon isovector Dirac radius at one loop (Bernard, Fearing, Hemmert & Meißner
    /// 1998): the linear form plus `-(1 + 5 g_A²)/(16 π² F²) ln(m_π²/m_π,phys²)`.
    NucleonRadiusLog,
}

/// Slurm settings for the job-array script.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct SlurmSpec {
    /// Partition (`--partition`).
    #[serde(default)]
    pub partition: Option<String>,
    /// Account (`--account`).
    #[serde(default)]
    pub account: Option<String>,
    /// Time limit per task (`--time`, e.g. `01:00:00`).
    #[serde(default)]
    pub time: Option<String>,
    /// CPUs per task (`--cpus-per-task`; also the run's worker threads).
    #[serde(default)]
    pub cpus_per_task: Option<u32>,
    /// Memory per task (`--mem`, e.g. `4G`).
    #[serde(default)]
    pub memory: Option<String>,
    /// Environment modules loaded before the run (`module load …`).
    #[serde(default)]
    pub modules: Vec<String>,
    /// Further `#SBATCH` options, each written as given (e.g. `--qos=short`).
    #[serde(default)]
    pub extra: Vec<String>,
    /// The formfactory executable the tasks run (default: this executable's path).
    #[serde(default)]
    pub executable: Option<PathBuf>,
}

//! What a run computed, stage by stage: the types the runner fills and the outputs
//! (`pipeline/output/`) read. They sit in their own file so that the runner, its stage
//! adapters and the outputs all depend on them without depending on each other.

use crate::data::CurrentKind;
use crate::error_budget::Budget;
use crate::kinematics::{FormFactor, Renormalized};
use crate::q2::Q2Fit;
use crate::ratio::{ChannelKey, ChannelResult, Estimator};
use crate::resample::autocorr::{AutocorrResult, BinningPoint};
use crate::resample::Resampled;
use crate::spectrum::SpectrumResult;
use std::collections::BTreeMap;
use std::time::Duration;

/// What the read-and-resample stage established.
#[derive(Clone, Debug)]
pub struct DataSummary {
    /// Configurations read (common to both tables).
    pub n_configs: usize,
    /// Configurations per bin.
    pub bin_size: usize,
    /// Bins after binning.
    pub n_bins: usize,
    /// Resamples.
    pub n_samples: usize,
    /// Two-point channels.
    pub n_twopt_channels: usize,
    /// Three-point channels (each `tsep` counted).
    pub n_threept_channels: usize,
    /// Time extent of the two-point data (`T`).
    pub t_extent: usize,
    /// Configurations dropped because only one of the two tables had them (ascending).
    pub dropped_not_in_both: Vec<i64>,
    /// Trailing configurations dropped because they did not fill a whole bin.
    pub dropped_by_binning: Vec<i64>,
    /// What the reader did beyond plain reading.
    pub notes: Vec<String>,
    /// Digests of the input tables computed while reading them, for the manifest.
    pub input_digests: Vec<crate::io::FileDigest>,
    /// The integrated autocorrelation time and binning study of a few representative data
    /// points, on the configurations before binning.
    pub autocorrelation: Vec<AutocorrPoint>,
    /// The integrated autocorrelation time of the binned data, pooled per table.
    pub binned_autocorrelation: crate::resample::inflation::BinnedAutocorrelation,
    /// The factor every resampled deviation was inflated by for it (`None`: not inflated).
    pub inflation: Option<f64>,
}

/// The Monte Carlo history of one representative data point: its integrated
/// autocorrelation time (Gamma method) and the error of its mean against the bin size.
#[derive(Clone, Debug)]
pub struct AutocorrPoint {
    /// The point in words (`Re C2 p=(0,0,0) t=12`).
    pub point: String,
    /// Configurations in the history.
    pub n: usize,
    /// The Gamma-method result, or why it could not be estimated.
    pub result: std::result::Result<AutocorrResult, String>,
    /// The naive error of the mean of bins of `bin_size` configurations, from 1 upwards.
    pub binning: Vec<BinningPoint>,
}

/// One form factor on one Q² shell from one excited-state method.
#[derive(Clone, Debug)]
pub struct FormFactorRow {
    /// The excited-state estimator (a plateau with its `tsep`).
    pub method: Estimator,
    /// The form factor.
    pub form_factor: FormFactor,
    /// Current kind of the shell's channels.
    pub kind: CurrentKind,
    /// Shell label.
    pub shell: String,
    /// Q² (lattice units).
    pub q2: Resampled,
    /// Q² in GeV².
    pub q2_gev2: Option<Resampled>,
    /// Renormalized value with its statistical, Z and total errors.
    pub value: Renormalized,
    /// Channels in the shell.
    pub n_channels: usize,
    /// chi²/dof of the decomposition (`None` when exactly determined).
    pub chi2_dof: Option<f64>,
    /// Condition number of the shell's whitened coefficient matrix (central value): the
    /// largest singular value over the smallest one kept.
    pub condition: f64,
}

/// A quantity derived from a Q² fit (radius, moment, charge).
#[derive(Clone, Debug)]
pub struct DerivedRow {
    /// The estimator of the form factors fitted.
    pub method: Estimator,
    /// Q² model (`dipole`, `z_expansion`).
    pub model: String,
    /// Quantity name (`GE(0)`, `r2_GE`, ...).
    pub quantity: String,
    /// The value, per resample.
    pub value: Resampled,
    /// Total error: statistical, and for `G(0)` the renormalization error in quadrature
    /// (`value.error()` is the statistical part alone).
    pub error_total: f64,
    /// Unit of the value.
    pub unit: String,
}

/// One Q² fit of one method's form factor.
#[derive(Clone, Debug)]
pub struct Q2FitResult {
    /// The estimator of the form factors fitted.
    pub method: Estimator,
    /// The form factor.
    pub form_factor: FormFactor,
    /// Model label (`dipole`, `z-expansion`, with a number when a model is listed twice).
    pub model: String,
    /// The fit (Q² in lattice units).
    pub fit: Q2Fit,
    /// Relative error `dZ / Z` of the renormalization of this form factor's current.
    pub z_relative_error: f64,
}

/// Everything a run computed, in stage order; later stages are `None`/empty when the run
/// stopped early.
#[derive(Clone, Debug)]
pub struct RunResults {
    /// Read and resample summary.
    pub data: Option<DataSummary>,
    /// Variational (GEVP) stage output, when `spectrum.gevp` is set.
    pub variational: Option<crate::variational::VariationalResult>,
    /// The single-operator analysis beside the optimised one
    /// (`spectrum.gevp.compare_operator`).
    pub comparison: Option<Comparison>,
    /// Spectrum stage output.
    pub spectrum: Option<SpectrumResult>,
    /// Ratio stage output per channel.
    pub channels: Option<BTreeMap<ChannelKey, ChannelResult>>,
    /// Form factors per method and shell (empty before the decomposition).
    pub form_factors: Vec<FormFactorRow>,
    /// Quantities from the Q² fits.
    pub derived: Vec<DerivedRow>,
    /// The Q² fits themselves (for plots).
    pub q2_fits: Vec<Q2FitResult>,
    /// The final value and error budget of every form factor and derived quantity.
    pub final_results: Vec<FinalRow>,
    /// Wall time per stage, in run order.
    pub timings: Vec<(String, Duration)>,
    /// Warnings collected from every stage.
    pub warnings: Vec<String>,
    /// The estimator whose numbers are final (`plateau` made concrete once the form factors
    /// are known).
    pub final_method: Estimator,
    /// When the run started (the whole run for [`super::run()`], else the computation).
    pub started: std::time::SystemTime,
    /// Where the results were written (set by [`super::run()`]).
    pub run_dir: Option<std::path::PathBuf>,
}

impl RunResults {
    /// Results of a run that has computed nothing yet, with the configured final method.
    pub(super) fn new(final_method: Estimator) -> Self {
        RunResults {
            data: None,
            variational: None,
            comparison: None,
            spectrum: None,
            channels: None,
            form_factors: Vec::new(),
            derived: Vec::new(),
            q2_fits: Vec::new(),
            final_results: Vec::new(),
            timings: Vec::new(),
            warnings: Vec::new(),
            final_method,
            started: std::time::SystemTime::now(),
            run_dir: None,
        }
    }
}

/// The single-operator analysis beside the optimised one.
#[derive(Clone, Debug)]
pub struct Comparison {
    /// The operator of the basis analysed alone.
    pub operator: String,
    /// Its spectrum.
    pub spectrum: SpectrumResult,
    /// Its ratio-stage results per channel (when the ratio stage ran).
    pub channels: Option<BTreeMap<ChannelKey, ChannelResult>>,
    /// Its form factors (when the decomposition ran).
    pub form_factors: Vec<FormFactorRow>,
}

/// The final value of one quantity.
#[derive(Clone, Debug)]
pub struct FinalRow {
    /// `GE`, `GM`, ... for a form factor at a shell; `r_GE`, `GM(0)`, ... for a derived one.
    pub quantity: String,
    /// The form factor's shell (`None` for a derived quantity).
    pub shell: Option<String>,
    /// Q² of the shell in lattice units and in GeV² (central values).
    pub q2: Option<(f64, Option<f64>)>,
    /// Unit of the value (empty when dimensionless).
    pub unit: String,
    /// The value and its error budget.
    pub budget: Budget,
}

//! The runner: the one place that owns the loop over the stages, their timing, warnings and
//! progress. Stages are pure computation; this module feeds each one the previous one's
//! results (read → bin and resample → spectrum → ratio and excited-state methods →
//! decomposition per method with renormalization → Q² fits) and hands everything to
//! [`super::output`], which writes the run directory all-or-nothing.
//!
//! Progress goes through the small [`Observer`] hooks, so the library never prints.

use super::plan::Plan;
use super::spec::{ResamplingMethod, Stage};
use crate::data::{CurrentKind, Momentum, ThreePointData, TwoPointData};
use crate::kinematics::{self, ChannelValue, FormFactor, KinematicSetup, ShellResult};
use crate::kinematics::{renormalize, Renormalized, ZFactors};
use crate::q2::{self, Q2Fit, Q2Model, Q2Point, Q2Units};
use crate::ratio::{self, ChannelKey, ChannelResult, Estimator, TwoPointStates};
use crate::resample::binning::{bin_threept, bin_twopt};
use crate::resample::{ResamplePlan, Resampled};
use crate::spectrum::{self, SpectrumResult};
use crate::{Error, Result};
use std::collections::BTreeMap;
use std::time::{Duration, Instant};

/// Hooks through which the runner reports progress; every method has a silent default.
pub trait Observer: Sync {
    /// A stage starts.
    fn stage_started(&self, _stage: &str) {}
    /// A stage finished after `elapsed`.
    fn stage_finished(&self, _stage: &str, _elapsed: Duration) {}
    /// `done` of the stage's `total` items (momenta, channels, estimators, fits) are done;
    /// may be called from any thread, not necessarily in order.
    fn progress(&self, _stage: &str, _done: usize, _total: usize) {}
    /// A warning was raised (it is also kept in [`RunResults::warnings`]).
    fn warning(&self, _message: &str) {}
}

/// An observer that reports nothing.
pub struct Silent;
impl Observer for Silent {}

/// What the read-and-resample stage established.
#[derive(Clone, Debug)]
pub struct DataSummary {
    /// Configurations read (common to both tables).
    pub n_configs: usize,
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
    pub comparison: Option<super::variational::Comparison>,
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
    pub final_results: Vec<super::final_results::FinalRow>,
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

pub(super) struct Recorder<'a> {
    observer: &'a dyn Observer,
    timings: Vec<(String, Duration)>,
    warnings: Vec<String>,
}

impl Recorder<'_> {
    fn stage<T>(&mut self, name: &str, f: impl FnOnce(&mut Self) -> Result<T>) -> Result<T> {
        self.observer.stage_started(name);
        let start = Instant::now();
        let out = f(self);
        let elapsed = start.elapsed();
        self.observer.stage_finished(name, elapsed);
        self.timings.push((name.to_string(), elapsed));
        out
    }

    pub(super) fn warn(&mut self, message: impl Into<String>) {
        let m = message.into();
        self.observer.warning(&m);
        self.warnings.push(m);
    }
}

/// Compute every stage the plan asks for (no files written; see [`super::run()`] for the
/// whole run with its run directory). With `jobs` the stages run on a dedicated rayon pool
/// of that many threads; results do not depend on it.
pub fn compute(plan: &Plan, observer: &dyn Observer) -> Result<RunResults> {
    match plan.jobs {
        Some(n) => {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(n.max(1))
                .build()
                .map_err(|e| Error::config(format!("cannot start {n} worker threads: {e}")))?;
            pool.install(|| compute_here(plan, observer))
        }
        None => compute_here(plan, observer),
    }
}

fn compute_here(plan: &Plan, observer: &dyn Observer) -> Result<RunResults> {
    let spec = &plan.spec;
    let mut rec = Recorder {
        observer,
        timings: Vec::new(),
        warnings: Vec::new(),
    };
    let final_method = spec.excited_states.final_method;
    let mut results = RunResults {
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
    };
    let (prepared, summary) = rec.stage("read", |rec| read_and_resample(plan, rec))?;
    let Prepared {
        mut two,
        mut three,
        plan: rplan,
    } = prepared;

    results.data = Some(summary);
    let mut single = None;
    if spec.spectrum.gevp.is_some() && plan.runs(Stage::Spectrum) {
        let opt = rec.stage("gevp", |rec| {
            super::variational::optimise(plan, &two, &three, &rplan, rec)
        })?;
        two = opt.two;
        three = opt.three;
        single = opt.single;
        results.variational = Some(opt.result);
    }
    if plan.runs(Stage::Spectrum) {
        let obs = rec.observer;
        let sp = rec.stage("spectrum", |_| {
            spectrum::run_with_progress(&two, &rplan, &spec.spectrum, &|d, t| {
                obs.progress("spectrum", d, t)
            })
        })?;
        for w in &sp.warnings {
            rec.warn(format!("spectrum: {w}"));
        }
        skip_dropped_momenta(&mut three, &sp.dropped, &mut rec);
        results.spectrum = Some(sp);
    }
    if plan.runs(Stage::Ratio) {
        let sp = results
            .spectrum
            .as_ref()
            .ok_or_else(|| Error::analysis("ratio", "the ratio needs the spectrum stage"))?;
        let mut states = two_point_states(sp);
        if let Some(v) = &results.variational {
            super::variational::fill_states(&mut states, sp, v, &mut rec);
        }
        let obs = rec.observer;
        let channels = rec.stage("ratio", |_| {
            ratio::analyse_all_with_progress(
                &three,
                &two,
                &rplan,
                &states,
                &spec.excited_states,
                &|d, t| obs.progress("ratio", d, t),
            )
        })?;
        for (key, c) in &channels {
            for n in &c.notes {
                rec.warn(format!("ratio {key}: {n}"));
            }
        }
        results.channels = Some(channels);
    }
    if plan.runs(Stage::Decomposition) {
        let rows = rec.stage("decomposition", |rec| decompose_all(plan, &results, rec))?;
        if let Some(largest) = largest_plateau(&rows) {
            if results.final_method.selects(largest) {
                results.final_method = largest;
            }
        }
        results.form_factors = rows;
    }
    if let Some(single) = single {
        let c = rec.stage("comparison", |rec| {
            super::variational::compare(plan, &rplan, single, &results, rec)
        })?;
        results.comparison = Some(c);
    }
    if plan.runs(Stage::Q2Fits) && !spec.q2_fits.form_factors.is_empty() {
        let fits = rec.stage("q2_fits", |rec| {
            Ok(q2_fits(plan, &results.form_factors, rec))
        })?;
        results.derived = fits.iter().flat_map(derived_rows).collect();
        if let Some(mass) = results.spectrum.as_ref().and_then(|s| s.mass.as_ref()) {
            results
                .derived
                .extend(dirac_pauli_rows(&fits, mass, &mut rec));
        }
        results.q2_fits = fits;
    }
    results.final_results = super::final_results::final_results(&results, spec.final_value.pin);
    results.timings = rec.timings;
    results.warnings = rec.warnings;
    Ok(results)
}

/// Remove the three-point channels whose sink or source momentum the spectrum dropped.
pub(super) fn skip_dropped_momenta(
    three: &mut ThreePointData,
    dropped: &[(Momentum, String)],
    rec: &mut Recorder,
) {
    if dropped.is_empty() {
        return;
    }
    let gone = |p: Momentum| dropped.iter().any(|(d, _)| *d == p);
    let before = three.channels.len();
    three
        .channels
        .retain(|k, _| !gone(k.pf) && !gone(k.source_momentum()));
    let n = before - three.channels.len();
    if n > 0 {
        rec.warn(format!(
            "ratio: {n} three-point channel(s) skipped: their sink or source momentum was \
             dropped by the spectrum stage"
        ));
    }
}

/// The binned data and the one resample plan every later stage uses.
struct Prepared {
    two: TwoPointData,
    three: ThreePointData,
    plan: ResamplePlan,
}

fn read_and_resample(plan: &Plan, rec: &mut Recorder) -> Result<(Prepared, DataSummary)> {
    let spec = &plan.spec;
    let read = super::read_data(plan)?;
    let (two, three, notes) = (read.two, read.three, read.notes);
    super::check_data_rules(plan, &two, &three)?;
    let n_configs = two.configs.len();
    if !read.dropped_configs.is_empty() {
        rec.warn(format!(
            "data: kept the {n_configs} configurations common to both tables and dropped {}: {}",
            read.dropped_configs.len(),
            config_list(&read.dropped_configs)
        ));
    }
    let b = spec.resampling.bin_size;
    let (two, report) = bin_twopt(&two, b)?;
    let (three, _) = bin_threept(&three, b)?;
    if !report.dropped_configs.is_empty() {
        rec.warn(format!(
            "binning by {b} dropped the last {} configuration(s): {}",
            report.dropped_configs.len(),
            config_list(&report.dropped_configs)
        ));
    }
    let n_bins = report.n_bins;
    let rplan = match spec.resampling.method {
        ResamplingMethod::Jackknife => ResamplePlan::jackknife(n_bins),
        ResamplingMethod::Bootstrap => {
            ResamplePlan::bootstrap(n_bins, spec.resampling.samples, spec.resampling.seed)
        }
    };
    let summary = DataSummary {
        n_configs,
        n_bins,
        n_samples: rplan.n_samples(),
        n_twopt_channels: two.channels.len(),
        n_threept_channels: three.channels.len(),
        t_extent: two.channels.values().map(|s| s.n_t).max().unwrap_or(0),
        dropped_not_in_both: read.dropped_configs,
        dropped_by_binning: report.dropped_configs,
        notes,
    };
    let prepared = Prepared {
        two,
        three,
        plan: rplan,
    };
    Ok((prepared, summary))
}

/// Configuration numbers for a message: all of them up to 20, else the first 20 and a count
/// (the manifest lists them all).
fn config_list(configs: &[i64]) -> String {
    const SHOWN: usize = 20;
    let head: Vec<String> = configs.iter().take(SHOWN).map(|c| c.to_string()).collect();
    if configs.len() > SHOWN {
        format!(
            "{}, … ({} more; all are listed in manifest.json)",
            head.join(", "),
            configs.len() - SHOWN
        )
    } else {
        head.join(", ")
    }
}

/// What the two-state ratio fit needs from the spectrum: per momentum the ground energy,
/// the amplitude ratio and the gap of the best multi-state fit.
pub(super) fn two_point_states(sp: &SpectrumResult) -> BTreeMap<Momentum, TwoPointStates> {
    sp.per_momentum
        .iter()
        .filter_map(|(p, m)| {
            Some((
                *p,
                TwoPointStates {
                    energy: m.ground_energy().clone(),
                    amp_ratio: m.amplitude_ratio()?,
                    gap: m.gap()?,
                },
            ))
        })
        .collect()
}

/// Every selected estimator's channel values, in estimator order.
fn method_values(
    methods: &[Estimator],
    channels: &BTreeMap<ChannelKey, ChannelResult>,
) -> Vec<(Estimator, Vec<ChannelValue>)> {
    let mut out: BTreeMap<Estimator, Vec<ChannelValue>> = BTreeMap::new();
    for (k, c) in channels {
        for (e, fit) in c.estimates() {
            if methods.iter().any(|m| m.selects(e)) {
                out.entry(e).or_default().push(ChannelValue {
                    pf: k.pf,
                    q: k.q,
                    current: k.current,
                    projector: k.projector,
                    re: fit.value.re.clone(),
                    im: fit.value.im.clone(),
                });
            }
        }
    }
    out.into_iter().collect()
}

/// The plateau at the largest `tsep` among the rows.
fn largest_plateau(rows: &[FormFactorRow]) -> Option<Estimator> {
    rows.iter()
        .map(|r| r.method)
        .filter(|m| m.tsep().is_some())
        .max()
}

pub(super) fn decompose_all(
    plan: &Plan,
    results: &RunResults,
    rec: &mut Recorder,
) -> Result<Vec<FormFactorRow>> {
    let spec = &plan.spec;
    let (Some(sp), Some(channels)) = (&results.spectrum, &results.channels) else {
        return Err(Error::analysis(
            "decomposition",
            "the decomposition needs the spectrum and ratio stages",
        ));
    };
    let mass = sp.mass.clone().ok_or_else(|| {
        Error::analysis(
            "decomposition",
            "no two-point data at momentum (0,0,0): the hadron mass is unknown",
        )
    })?;
    let d = &spec.decomposition;
    let fitted = sp
        .per_momentum
        .iter()
        .map(|(p, m)| (*p, m.ground_energy().clone()))
        .collect();
    let setup = KinematicSetup {
        hadron: spec.ensemble.hadron,
        l: spec.ensemble.l as usize,
        twist_sink: spec.ensemble.twist,
        twist_source: spec.ensemble.twist,
        mass,
        energies: d.energies.energies(fitted),
        spacing_fm: Some(spec.ensemble.spacing_fm),
    };
    let mut rows = Vec::new();
    let by_method = method_values(&spec.excited_states.methods, channels);
    let total = by_method.len();
    for (i, (method, values)) in by_method.into_iter().enumerate() {
        rec.observer.progress("decomposition", i, total);
        if values.is_empty() {
            rec.warn(format!("decomposition {method}: no channel has a value"));
            continue;
        }
        let dec = kinematics::decompose(&values, &setup, d)?;
        for s in &dec.skipped {
            rec.warn(format!(
                "decomposition {method}: shell {} ({:?}) skipped: {}",
                s.label, s.kind, s.reason
            ));
        }
        for shell in &dec.shells {
            if !shell.undetermined.is_empty() {
                let names: Vec<&str> = shell.undetermined.iter().map(|f| f.name()).collect();
                rec.warn(format!(
                    "decomposition {method}: shell {} ({:?}) does not determine {} (a singular value below {:e} of the largest): not reported; needs another q direction or projector",
                    shell.label,
                    shell.kind,
                    names.join(", "),
                    kinematics::SINGULAR_THRESHOLD
                ));
            }
            rows.extend(shell_rows(method, shell, &spec.renormalization));
        }
    }
    Ok(rows)
}

fn shell_rows(method: Estimator, shell: &ShellResult, z: &ZFactors) -> Vec<FormFactorRow> {
    shell
        .form_factors
        .iter()
        .map(|(ff, v)| FormFactorRow {
            method,
            form_factor: *ff,
            kind: shell.kind,
            shell: shell.label.clone(),
            q2: shell.q2.clone(),
            q2_gev2: shell.q2_gev2.clone(),
            value: renormalize(v, z.get(shell.kind)),
            n_channels: shell.n_channels,
            chi2_dof: shell.chi2_dof,
        })
        .collect()
}

/// Fit each listed form factor of every method (plateaus: the largest `tsep` only); a fit
/// that fails becomes a warning.
fn q2_fits(plan: &Plan, rows: &[FormFactorRow], rec: &mut Recorder) -> Vec<Q2FitResult> {
    let spec = &plan.spec;
    let largest = largest_plateau(rows);
    let mut groups: BTreeMap<(Estimator, FormFactor), Vec<Q2Point>> = BTreeMap::new();
    for r in rows {
        if r.method.tsep().is_some() && Some(r.method) != largest {
            continue;
        }
        if !spec.q2_fits.form_factors.contains_key(&r.form_factor) {
            continue;
        }
        groups
            .entry((r.method, r.form_factor))
            .or_default()
            .push(Q2Point {
                q2: r.q2.clone(),
                value: r.value.value.clone(),
            });
    }
    let units = Q2Units::Lattice {
        spacing_fm: Some(spec.ensemble.spacing_fm),
    };
    let mut out = Vec::new();
    let total = groups.len();
    for (i, ((method, ff), points)) in groups.into_iter().enumerate() {
        rec.observer.progress("q2_fits", i, total);
        let list = &spec.q2_fits.form_factors[&ff];
        for (i, settings) in list.iter().enumerate() {
            let base = match settings.model {
                Q2Model::Dipole { .. } => "dipole",
                Q2Model::ZExpansion { .. } => "z-expansion",
            };
            let same = list
                .iter()
                .filter(|s| {
                    std::mem::discriminant(&s.model) == std::mem::discriminant(&settings.model)
                })
                .count();
            let model = if same > 1 {
                format!("{base}-{}", i + 1)
            } else {
                base.to_string()
            };
            match q2::fit(&points, settings, units) {
                Ok(fit) => {
                    for w in &fit.warnings {
                        rec.warn(format!("q2_fits {method} {ff} {model}: {w}"));
                    }
                    if fit.n_failed > 0 {
                        rec.warn(format!(
                            "q2_fits {method} {ff} {model}: {} resample fit(s) did not converge",
                            fit.n_failed
                        ));
                    }
                    let z = spec.renormalization.get(ff.current_kind());
                    out.push(Q2FitResult {
                        method,
                        form_factor: ff,
                        model,
                        fit,
                        z_relative_error: (z.error / z.value).abs(),
                    });
                }
                Err(e) => rec.warn(format!("q2_fits {method} {ff} {model}: {e}")),
            }
        }
    }
    out
}

/// `G(0)`, `r²` (fm²) and `r` (fm) of one fit.
fn derived_rows(f: &Q2FitResult) -> Vec<DerivedRow> {
    let ff = f.form_factor.name();
    let row = |quantity: String, value: Resampled, z_rel: f64, unit: &str| DerivedRow {
        method: f.method,
        model: f.model.clone(),
        quantity,
        error_total: value.error().hypot(value.central * z_rel),
        value,
        unit: unit.to_string(),
    };
    // G(0) scales with Z; radii do not
    let mut out = vec![row(
        format!("{ff}(0)"),
        f.fit.g0.clone(),
        f.z_relative_error,
        "",
    )];
    if let Some(r2) = &f.fit.r2_fm2 {
        out.push(row(format!("r2_{ff}"), r2.clone(), 0.0, "fm^2"));
    }
    if let Some(r) = f.fit.radius_fm() {
        out.push(row(format!("r_{ff}"), r, 0.0, "fm"));
    }
    out
}

/// `kappa`, `r1²`, `r2²` (fm²) and `r1`, `r2` (fm) per method and model from the G_E and G_M
/// fits of the same method and model (`q2::dirac_pauli_radii`).
fn dirac_pauli_rows(fits: &[Q2FitResult], mass: &Resampled, rec: &mut Recorder) -> Vec<DerivedRow> {
    let mut out = Vec::new();
    for ge in fits.iter().filter(|f| f.form_factor == FormFactor::GE) {
        let Some(gm) = fits.iter().find(|f| {
            f.form_factor == FormFactor::GM && f.method == ge.method && f.model == ge.model
        }) else {
            continue;
        };
        let dp = match q2::dirac_pauli_radii(&ge.fit, &gm.fit, mass) {
            Ok(dp) => dp,
            Err(e) => {
                rec.warn(format!(
                    "q2_fits {} {}: Dirac/Pauli radii: {e}",
                    ge.method, ge.model
                ));
                continue;
            }
        };
        let row = |quantity: &str, value: Resampled, unit: &str| DerivedRow {
            method: ge.method,
            model: ge.model.clone(),
            quantity: quantity.to_string(),
            error_total: value.error(),
            value,
            unit: unit.to_string(),
        };
        // kappa = G_M(0) - G_E(0) scales with Z (the vector current's, shared by both)
        let z_rel = ge.z_relative_error;
        let mut kappa = row("kappa", dp.kappa.clone(), "");
        kappa.error_total = kappa.error_total.hypot(kappa.value.central * z_rel);
        out.push(kappa);
        for (name, r2) in [("r1", dp.r1_2_fm2), ("r2", dp.r2_2_fm2)] {
            let Some(r2) = r2 else { continue };
            let positive = r2.central > 0.0 && r2.samples.iter().all(|x| *x > 0.0);
            if positive {
                out.push(row(name, r2.sqrt(), "fm"));
            }
            out.push(row(&format!("{name}^2"), r2, "fm^2"));
        }
    }
    out
}

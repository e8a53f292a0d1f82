//! The declarative YAML pipeline: its types, its validation, and the runner that chains the
//! stages.
//!
//! A pipeline file is read in two steps: [`spec`] parses it into plain serde types (unknown
//! keys refused, errors with line and column), then [`plan::load`] builds a validated
//! [`Plan`] (paths resolved, ranges and names checked, near misses suggested) before any
//! computation. The JSON Schema of the file ([`schema_json`]) is generated from the same
//! types, so editors can complete and check pipeline files.

mod data_checks;
pub mod final_results;
mod memory;
mod observer;
pub mod output;
pub mod plan;
pub mod reference;
mod results;
pub mod run;
pub mod spec;
mod stages;
pub mod variational;
pub mod yaml;

pub use plan::{load, Plan};
pub use run::{compute, Observer, RunResults, Silent};
pub use spec::PipelineSpec;

use crate::data::flavor;
use crate::data::{ThreePointData, TwoPointData};
use crate::io::{read_dataset, ReadOptions};
use crate::Result;
use spec::Stage;
use std::collections::BTreeSet;

/// The JSON Schema of the pipeline file, pretty-printed with a trailing newline (the text
/// of `schemas/pipeline.schema.json`).
pub fn schema_json() -> String {
    let mut text = serde_json::to_string_pretty(&schema_value()).unwrap_or_default();
    text.push('\n');
    text
}

/// The JSON Schema of the pipeline file as a JSON value.
pub fn schema_value() -> serde_json::Value {
    serde_json::to_value(schemars::schema_for!(PipelineSpec)).unwrap_or_default()
}

/// `formfactory check`: parse and validate the pipeline with its overrides, then read the
/// data and apply every data rule (tables, flavour combination, selections, binning, time
/// ranges, momenta the ratio needs), computing nothing; returns a short summary.
///
/// A packed file and CSV tables are walked one channel at a time (`read_shapes`) unless a
/// flavour combination (`ratio.flavor`) or one operator's selection (`data.operator`) has to
/// compute new channels from several read ones; then, for other HDF5 sources, for tables
/// from standard input and for CSV tables whose configurations differ under
/// `data.keep_common_configs`, the data are read whole.
pub fn check(path: &std::path::Path, sets: &[String]) -> Result<String> {
    let plan = load(path, sets)?;
    let (ReadData { two, three, .. }, facts) = match read_shapes(&plan)? {
        Some((ds, facts)) => (select(&plan, ds)?, Some(facts)),
        None => (read_data(&plan)?, None),
    };
    let report = crate::resample::binning::plan_bins(&two.configs, plan.spec.resampling.bin_size)
        .map_err(|e| plan.error("resampling.bin_size", e))?;
    check_rules(&plan, &two, &three, facts.as_ref())?;
    Ok(format!(
        "{}: valid; stages up to `{}`; {} configurations in {} bins; {} two-point and {} three-point channels\n",
        path.display(),
        plan.last_stage.name(),
        two.configs.len(),
        report.n_bins,
        two.channels.len(),
        three.channels.len()
    ))
}

/// Read both tables, form the flavour combination and keep the selected `tsep` and
/// currents. Errors about a selection name its YAML key.
pub fn read_data(plan: &Plan) -> Result<ReadData> {
    let opts = ReadOptions {
        keep_common_configs: plan.spec.data.keep_common_configs,
    };
    select(plan, read_source(plan, &opts, &|_, _| {})?)
}

/// The shapes of a packed source's or the CSV tables' channels with the facts the value
/// checks need ([`data_checks::Shapes`]), read one channel at a time, on common
/// configurations as [`read_source`] gives them; `None` when the source is another HDF5
/// source or when the selection needs the values (`ratio.flavor`, `data.operator`).
fn read_shapes(plan: &Plan) -> Result<Option<(crate::io::Dataset, data_checks::Facts)>> {
    let spec = &plan.spec;
    if spec.ratio.flavor.is_some() || spec.data.operator.is_some() {
        return Ok(None);
    }
    let packed = match plan.hdf5.as_ref().map(|m| &m.layout) {
        None => return csv_shapes(plan),
        Some(crate::io::hdf5::Layout::Packed(p)) => p,
        _ => return Ok(None),
    };
    if !crate::io::hdf5::ENABLED {
        return Ok(None);
    }
    let t_extent = spec.ensemble.t.map(|t| t as usize);
    let mut shapes = data_checks::Shapes::new(t_extent);
    let as_plan_error = |e| match e {
        crate::Error::Config { message } => plan.error("data.hdf5", message),
        other => other,
    };
    crate::io::hdf5::visit_packed(packed, &mut shapes).map_err(as_plan_error)?;
    let two = crate::io::hdf5::cut_time(shapes.two, t_extent, packed).map_err(as_plan_error)?;
    let name = std::path::Path::new("data.hdf5");
    let opts = ReadOptions {
        keep_common_configs: spec.data.keep_common_configs,
    };
    let ds = crate::io::on_common_configs(two, name, shapes.three, name, Vec::new(), &opts)?;
    Ok(Some((ds, shapes.facts)))
}

/// [`read_shapes`] of CSV tables: each read one channel at a time (the whole read's
/// errors, in its order); `None` when a table comes from standard input or when the tables
/// cover different configurations and `data.keep_common_configs` keeps the common ones
/// (the values would have to be cut to them first).
fn csv_shapes(plan: &Plan) -> Result<Option<(crate::io::Dataset, data_checks::Facts)>> {
    use crate::io::hdf5::PackedVisitor;
    let stdin = std::path::Path::new("-");
    if plan.twopt == stdin || plan.threept == stdin {
        return Ok(None);
    }
    let init = || data_checks::Shapes::new(None);
    let two =
        crate::io::twopt_by_channel(&plan.twopt, init, |s, k, series| s.twopt(k.clone(), series))?;
    let three = crate::io::threept_by_channel(&plan.threept, init, |s, k, series| {
        s.threept(k.clone(), series)
    })?;
    let keep_common_configs = plan.spec.data.keep_common_configs;
    if keep_common_configs && two.configs != three.configs {
        return Ok(None);
    }
    let shapes = data_checks::Shapes::of_tables(two, three);
    let opts = ReadOptions {
        keep_common_configs,
    };
    let ds = crate::io::on_common_configs(
        shapes.two,
        &plan.twopt,
        shapes.three,
        &plan.threept,
        Vec::new(),
        &opts,
    )?;
    Ok(Some((ds, shapes.facts)))
}

/// Form the flavour combination and keep the selected operators, `tsep` and currents of
/// what [`read_source`] read.
fn select(plan: &Plan, ds: crate::io::Dataset) -> Result<ReadData> {
    let spec = &plan.spec;
    let mut three = ds
        .threept
        .ok_or_else(|| plan.error("data.threept", "the three-point table could not be read"))?;
    if let Some(combo) = &spec.ratio.flavor {
        three = flavor::combine(&three, std::slice::from_ref(combo))
            .map_err(|e| plan.error("ratio.flavor", e))?;
    }
    let (two, mut three) = select_operators(plan, ds.twopt, three)?;
    let available: BTreeSet<u32> = three.channels.keys().map(|k| k.tsep).collect();
    if let Some(tseps) = &spec.ratio.tsep {
        for (i, t) in tseps.iter().enumerate() {
            if !available.contains(t) {
                return Err(plan.error(
                    &format!("ratio.tsep[{i}]"),
                    format!("tsep = {t} is not in the three-point data; available: {available:?}"),
                ));
            }
        }
        three.channels.retain(|k, _| tseps.contains(&k.tsep));
    }
    if let Some(currents) = &spec.ratio.currents {
        let present: BTreeSet<&str> = three.channels.keys().map(|k| k.current.name()).collect();
        for (i, c) in currents.iter().enumerate() {
            if !present.contains(c.as_str()) {
                return Err(plan.error(
                    &format!("ratio.currents[{i}]"),
                    format!(
                        "the current `{c}` is not in the three-point data; available: {present:?}"
                    ),
                ));
            }
        }
        three
            .channels
            .retain(|k, _| currents.iter().any(|c| c == k.current.name()));
    }
    Ok(ReadData {
        two,
        three,
        dropped_configs: ds.dropped_configs,
        notes: ds.notes,
        digests: ds.digests,
    })
}

/// The two tables of a pipeline as read and selected, with what the reader dropped.
pub struct ReadData {
    /// The two-point table.
    pub two: TwoPointData,
    /// The three-point table, after the flavour combination and the `tsep`/current selection.
    pub three: ThreePointData,
    /// Configurations only one table had (dropped under `data.keep_common_configs`).
    pub dropped_configs: Vec<i64>,
    /// What the reader did beyond plain reading.
    pub notes: Vec<String>,
    /// Digests of the tables computed while reading them (none for HDF5 sources).
    pub digests: Vec<crate::io::FileDigest>,
}

/// Tables with operator labels: keep them whole for the variational analysis
/// (`spectrum.gevp`), or keep one operator's diagonal correlators (`data.operator`).
fn select_operators(
    plan: &Plan,
    two: TwoPointData,
    three: ThreePointData,
) -> Result<(TwoPointData, ThreePointData)> {
    let spec = &plan.spec;
    let labelled = crate::variational::basis::has_operators(&two, &three);
    match (&spec.data.operator, &spec.spectrum.gevp, labelled) {
        (Some(_), Some(_), _) => Err(plan.error(
            "data.operator",
            "data.operator selects one operator, spectrum.gevp combines them all: set one of the two (spectrum.gevp.compare_operator shows one operator beside the optimised one)",
        )),
        (Some(op), None, true) => crate::variational::basis::select_operator(&two, &three, op)
            .map_err(|e| plan.error("data.operator", e)),
        (Some(_), None, false) => Err(plan.error(
            "data.operator",
            "the tables carry no operator labels (sink_op, source_op columns); remove data.operator",
        )),
        (None, Some(_), false) => Err(plan.error(
            "spectrum.gevp",
            "the variational analysis needs correlator matrices: the two-point table has no sink_op / source_op labels",
        )),
        (None, None, true) => Err(plan.error(
            "data.operator",
            format!(
                "the tables carry operator labels (operators {:?}): set data.operator to analyse one operator, or spectrum.gevp for the variational analysis",
                crate::variational::basis::operators(&two)
            ),
        )),
        (None, _, _) => Ok((two, three)),
    }
}

/// Read the correlators the `data` section names (CSV tables or an HDF5 source) on common
/// configurations, before any selection; `progress` sees (files done, files in all) of an
/// HDF5 source.
pub fn read_source(
    plan: &Plan,
    opts: &ReadOptions,
    progress: &dyn Fn(usize, usize),
) -> Result<crate::io::Dataset> {
    let Some(mapping) = &plan.hdf5 else {
        return read_dataset(&plan.twopt, Some(&plan.threept), opts);
    };
    let t_extent = plan.spec.ensemble.t.map(|t| t as usize);
    let (two, three, notes) =
        crate::io::hdf5::read_source(mapping, t_extent, progress).map_err(|e| match e {
            crate::Error::Config { message } => plan.error("data.hdf5", message),
            other => other,
        })?;
    let name = std::path::Path::new("data.hdf5");
    crate::io::on_common_configs(two, name, three, name, notes, opts)
}

/// Rules that need the data: time ranges against the table, `tau_cut` against every
/// `tsep`, one flavour per channel, and the two-point momenta every ratio divides by.
pub(crate) fn check_data_rules(
    plan: &Plan,
    two: &TwoPointData,
    three: &ThreePointData,
) -> Result<()> {
    check_rules(plan, two, three, None)
}

/// [`check_data_rules`] on data that may hold only shapes, their values' facts in `facts`.
fn check_rules(
    plan: &Plan,
    two: &TwoPointData,
    three: &ThreePointData,
    facts: Option<&data_checks::Facts>,
) -> Result<()> {
    let spec = &plan.spec;
    memory::check_memory(plan, two, three)?;
    let hdf5 = std::path::Path::new("data.hdf5");
    let (twopt, threept) = match plan.hdf5 {
        Some(_) => (hdf5, hdf5),
        None => (plan.twopt.as_path(), plan.threept.as_path()),
    };
    data_checks::check_values(two, twopt, three, threept, facts)?;
    let n_t = two.channels.values().map(|s| s.n_t).min().unwrap_or(0);
    let data_t = two.channels.values().map(|s| s.n_t).max().unwrap_or(0);
    if let Some(t) = spec
        .ensemble
        .t
        .filter(|&t| data_t > 0 && t as usize != data_t)
    {
        return Err(plan.error(
            "ensemble.T",
            format!(
                "T = {t} does not match the two-point data, whose time slices run over \
                 t = 0..{} (T = {data_t}); set ensemble.T to the lattice's time extent, or \
                 omit it to take T from the data",
                data_t - 1
            ),
        ));
    }
    if let Some(t_max) = spec.spectrum.t_max {
        if t_max >= n_t {
            return Err(plan.error(
                "spectrum.t_max",
                format!(
                    "t_max = {t_max} is beyond the two-point data (t = 0..{})",
                    n_t.saturating_sub(1)
                ),
            ));
        }
    }
    let tseps: BTreeSet<u32> = three.channels.keys().map(|k| k.tsep).collect();
    if let Some(m) = tseps
        .iter()
        .find_map(|t| spec.excited_states.tsep_problem(*t))
    {
        return Err(plan.error("excited_states.tau_cut", format!("{m} (in the data)")));
    }
    let flavors: BTreeSet<Option<&str>> =
        three.channels.keys().map(|k| k.flavor.as_deref()).collect();
    if flavors.len() > 1 {
        return Err(plan.error(
            "ratio.flavor",
            format!("the three-point data hold several flavours {flavors:?}: choose one combination, e.g. `flavor: {{label: u-d, terms: [{{flavor: u, weight: 1}}, {{flavor: d, weight: -1}}]}}`"),
        ));
    }
    let smear = spec.excited_states.two_point_smear.as_deref();
    let momenta: BTreeSet<[i32; 3]> = two
        .channels
        .keys()
        .filter(|k| k.smear.as_deref() == smear)
        .map(|k| k.momentum)
        .collect();
    if plan.runs(Stage::Spectrum) && !momenta.contains(&[0, 0, 0]) {
        return Err(plan.error(
            "data.twopt",
            "the two-point data have no channel at momentum (0,0,0): the hadron mass cannot be fitted",
        ));
    }
    for k in three.channels.keys() {
        for p in [k.pf, k.source_momentum()] {
            if !momenta.contains(&p) {
                return Err(plan.error(
                    "data.twopt",
                    format!(
                        "the ratio of three-point channel {} needs the two-point function at momentum {}, which is not in the two-point data",
                        crate::io::describe_threept(k),
                        crate::data::momentum_text(p)
                    ),
                ));
            }
        }
    }
    // one twist per two-point function when sink and source twists differ
    stages::spectrum_inputs::spectrum_settings(plan, two, three)?;
    Ok(())
}

/// Run the whole analysis: check the data rules, compute every stage, write the run
/// directory all-or-nothing (an existing one is replaced only with `plan.force`). The
/// manifest, written last, covers the whole run, the report stage included.
pub fn run(plan: &Plan, observer: &dyn Observer) -> Result<RunResults> {
    let started = std::time::SystemTime::now();
    let inputs = [plan.source.as_path(), &plan.twopt, &plan.threept];
    let rules = crate::report::OutputRules::run(plan.force, &inputs);
    let dir = crate::report::RunDir::create_with(&plan.out_dir, &rules)?;
    for note in dir.notes() {
        observer.warning(note);
    }
    let mut results = run::compute(plan, observer)?;
    results.started = started;
    let start = std::time::Instant::now();
    observer.stage_started("report");
    output::write_all(plan, &mut results, dir.path())?;
    let elapsed = start.elapsed();
    observer.stage_finished("report", elapsed);
    results.timings.push(("report".into(), elapsed));
    output::write_manifest(plan, &results, dir.path())?;
    results.run_dir = Some(dir.commit()?);
    Ok(results)
}

//! The runner: the one place that owns the loop over the stages, their timing, warnings and
//! progress. Stages are pure computation; this module feeds each one the previous one's
//! results (read → bin and resample → spectrum → ratio and excited-state methods →
//! decomposition per method with renormalization → Q² fits) and hands everything to
//! [`super::output`], which writes the run directory all-or-nothing. What each stage takes
//! from the ones before it is in `stages/`; the results are typed in `results.rs`.
//!
//! Progress goes through the small [`Observer`] hooks, so the library never prints.

pub use super::observer::{Observer, Silent};
pub use super::results::{DataSummary, DerivedRow, FormFactorRow, Q2FitResult, RunResults};

use super::observer::Recorder;
use super::plan::Plan;
use super::spec::Stage;
use super::stages::data::{read_and_resample, Prepared};
use super::stages::decomposition::{decompose_all, largest_plateau};
use super::stages::q2_fits::{derived_rows, dirac_pauli_rows, q2_fits};
use super::stages::ratio_inputs::{skip_dropped_momenta, two_point_states};
use super::stages::spectrum_inputs::spectrum_settings;
use crate::data::{ThreePointData, TwoPointData};
use crate::ratio::{self, ChannelKey, ChannelResult};
use crate::resample::ResamplePlan;
use crate::spectrum;
use crate::{Error, Result};
use std::collections::BTreeMap;

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

/// The loop over the stages, on the current thread pool.
fn compute_here(plan: &Plan, observer: &dyn Observer) -> Result<RunResults> {
    let spec = &plan.spec;
    let mut rec = Recorder::new(observer);
    let mut results = RunResults::new(spec.excited_states.final_method);
    let (prepared, summary) = rec.stage("read", |rec| read_and_resample(plan, rec))?;
    super::memory::release_free_memory();
    results.data = Some(summary);
    let Prepared {
        mut two,
        mut three,
        plan: rplan,
    } = prepared;
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
        spectrum_stage(plan, &two, &mut three, &rplan, &mut rec, &mut results)?;
        super::memory::release_free_memory();
    }
    if plan.runs(Stage::Ratio) {
        // The stage consumes the tables: no later stage reads the raw data.
        ratio_stage(plan, two, three, &rplan, &mut rec, &mut results)?;
        super::memory::release_free_memory();
    }
    if plan.runs(Stage::Decomposition) {
        decomposition_stage(plan, &mut rec, &mut results)?;
    }
    if let Some(single) = single {
        let c = rec.stage("comparison", |rec| {
            super::variational::compare(plan, &rplan, single, &results, rec)
        })?;
        results.comparison = Some(c);
    }
    if plan.runs(Stage::Q2Fits) && !spec.q2_fits.form_factors.is_empty() {
        q2_fits_stage(plan, &mut rec, &mut results)?;
    }
    results.final_results = super::final_results::final_results(&results, spec.final_value.pin);
    (results.timings, results.warnings) = rec.finish();
    Ok(results)
}

/// Fit the spectrum at every momentum; drop the three-point channels whose momenta it lost.
fn spectrum_stage(
    plan: &Plan,
    two: &TwoPointData,
    three: &mut ThreePointData,
    rplan: &ResamplePlan,
    rec: &mut Recorder,
    results: &mut RunResults,
) -> Result<()> {
    let obs = rec.observer;
    let settings = spectrum_settings(plan, two, three)?;
    let sp = rec.stage("spectrum", |_| {
        spectrum::run_with_progress(two, rplan, &settings, &|d, t| {
            obs.progress("spectrum", d, t)
        })
    })?;
    for w in &sp.warnings {
        rec.warn(format!("spectrum: {w}"));
    }
    skip_dropped_momenta(three, &sp.dropped, rec);
    results.spectrum = Some(sp);
    Ok(())
}

/// The ratio and its excited-state estimators per channel; the tables are dropped as the
/// ratios are built ([`ratio::analyse_all_consuming`]).
fn ratio_stage(
    plan: &Plan,
    two: TwoPointData,
    three: ThreePointData,
    rplan: &ResamplePlan,
    rec: &mut Recorder,
    results: &mut RunResults,
) -> Result<()> {
    let sp = results
        .spectrum
        .as_ref()
        .ok_or_else(|| Error::analysis("ratio", "the ratio needs the spectrum stage"))?;
    let mut states = two_point_states(sp, rec);
    if let Some(v) = &results.variational {
        super::variational::fill_states(&mut states, sp, v, rec);
    }
    let obs = rec.observer;
    let channels = rec.stage("ratio", |_| {
        ratio::analyse_all_consuming(
            three,
            two,
            rplan,
            &states,
            &plan.spec.excited_states,
            &|d, t| obs.progress("ratio", d, t),
        )
    })?;
    for w in grouped_notes(&channels) {
        rec.warn(w);
    }
    results.channels = Some(channels);
    Ok(())
}

/// The ratio stage's notes as warnings, one per kind: a note that recurs in several channels
/// (its channel named in it) is said once with the count and the first channels.
fn grouped_notes(channels: &BTreeMap<ChannelKey, ChannelResult>) -> Vec<String> {
    const SHOWN: usize = 6;
    let mut kinds: Vec<(String, Vec<String>)> = Vec::new();
    for (key, c) in channels {
        let name = key.to_string();
        for n in &c.notes {
            let kind = n.replace(&format!(" of channel {name}"), "");
            let kind = kind.strip_prefix("ratio: ").unwrap_or(&kind);
            let kind = kind.replace(&name, "<channel>");
            match kinds.iter_mut().find(|(k, _)| *k == kind) {
                Some((_, keys)) => keys.push(name.clone()),
                None => kinds.push((kind, vec![name.clone()])),
            }
        }
    }
    kinds
        .into_iter()
        .map(|(kind, keys)| match keys.as_slice() {
            [one] => format!("ratio {one}: {}", kind.replace("<channel>", one)),
            _ => {
                let more = keys.len().saturating_sub(SHOWN);
                let mut list = keys[..keys.len().min(SHOWN)].join("; ");
                if more > 0 {
                    list.push_str(&format!("; … ({more} more)"));
                }
                format!("ratio: {kind}, in {} channels ({list})", keys.len())
            }
        })
        .collect()
}

/// Form factors per estimator and shell; `plateau` as the final method becomes the plateau
/// at the largest `tsep`.
fn decomposition_stage(plan: &Plan, rec: &mut Recorder, results: &mut RunResults) -> Result<()> {
    let rows = rec.stage("decomposition", |rec| decompose_all(plan, results, rec))?;
    if let Some(largest) = largest_plateau(&rows) {
        if results.final_method.selects(largest) {
            results.final_method = largest;
        }
    }
    results.form_factors = rows;
    Ok(())
}

/// The Q² fits and the quantities derived from them.
fn q2_fits_stage(plan: &Plan, rec: &mut Recorder, results: &mut RunResults) -> Result<()> {
    let fits = rec.stage("q2_fits", |rec| {
        Ok(q2_fits(plan, &results.form_factors, rec))
    })?;
    results.derived = fits.iter().flat_map(derived_rows).collect();
    if let Some(mass) = results.spectrum.as_ref().and_then(|s| s.mass.as_ref()) {
        results.derived.extend(dirac_pauli_rows(&fits, mass, rec));
    }
    results.q2_fits = fits;
    Ok(())
}

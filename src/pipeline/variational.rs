//! The runner's part of the variational analysis: run the GEVP stage on the binned
//! correlator matrices, hand the projected (optimised-operator) data to the later stages,
//! and, when `spectrum.gevp.compare_operator` names one operator of the basis, run the
//! spectrum, ratio and decomposition once more on that operator's own correlators so the
//! report can show both side by side.

pub use super::results::Comparison;

use super::observer::Recorder;
use super::plan::Plan;
use super::results::RunResults;
use super::spec::Stage;
use super::stages::decomposition::decompose_all;
use super::stages::ratio_inputs::{skip_dropped_momenta, two_point_states};
use super::stages::spectrum_inputs::spectrum_settings;
use crate::data::{ThreePointData, TwoPointData};
use crate::ratio;
use crate::resample::ResamplePlan;
use crate::spectrum::{self, SpectrumResult};
use crate::variational::{self, basis, project, VariationalResult};
use crate::Result;
use std::collections::BTreeMap;

/// What the variational stage hands on.
pub(super) struct Optimised {
    /// Projected two-point functions (one channel per momentum).
    pub two: TwoPointData,
    /// Projected three-point functions.
    pub three: ThreePointData,
    /// The GEVP results.
    pub result: VariationalResult,
    /// The comparison operator's own data (label, two-point, three-point).
    pub single: Option<(String, TwoPointData, ThreePointData)>,
}

/// Solve the GEVP per momentum and project both tables onto the optimised operators.
pub(super) fn optimise(
    plan: &Plan,
    two: &TwoPointData,
    three: &ThreePointData,
    rplan: &ResamplePlan,
    rec: &mut Recorder,
) -> Result<Optimised> {
    let settings = &plan.spec.spectrum;
    let result = variational::run(two, rplan, settings)?;
    for w in &result.warnings {
        rec.warn(format!("gevp: {w}"));
    }
    let vectors = result.vectors();
    let ops = &result.operators;
    let p_two = project::project_twopt(two, ops, &vectors)?;
    let p_three = project::project_threept(three, ops, &vectors)?;
    let single = match settings
        .gevp
        .as_ref()
        .and_then(|g| g.compare_operator.clone())
    {
        Some(op) => {
            let (t, h) = basis::select_operator(two, three, &op)
                .map_err(|e| plan.error("spectrum.gevp.compare_operator", e))?;
            Some((op, t, h))
        }
        None => None,
    };
    Ok(Optimised {
        two: p_two,
        three: p_three,
        result,
        single,
    })
}

/// Momenta whose projected two-point function shows no resolvable excited state (the aim of
/// the projection) get the two-state ratio model's parameters from the GEVP: the gap from
/// the first two principal-correlator energies and the amplitude ratio 0, i.e. the projected
/// two-point function taken as free of excited states while the three-point side keeps its
/// fitted excited terms. Each such momentum is named in a warning.
pub(super) fn fill_states(
    states: &mut BTreeMap<crate::data::Momentum, ratio::TwoPointStates>,
    sp: &SpectrumResult,
    v: &VariationalResult,
    rec: &mut Recorder,
) {
    let mut filled = Vec::new();
    for (p, m) in &sp.per_momentum {
        if states.contains_key(p) {
            continue;
        }
        let Some(g) = v.per_momentum.get(p) else {
            continue;
        };
        let (Some(e0), Some(e1)) = (g.energy(0), g.energy(1)) else {
            continue;
        };
        let gap = e1 - e0;
        if gap.central <= 0.0 {
            continue;
        }
        let energy = m.ground_energy().clone();
        let zero = energy.map(|_| 0.0);
        states.insert(
            *p,
            ratio::TwoPointStates {
                energy,
                amp_ratio: zero,
                gap,
            },
        );
        filled.push(format!("({},{},{})", p[0], p[1], p[2]));
    }
    if !filled.is_empty() {
        rec.warn(format!(
            "gevp: the projected two-point function shows no resolvable excited state at {}:              the two-state ratio fit takes the gap from the GEVP (E1 - E0 of the principal              correlators) and the two-point amplitude ratio as 0",
            filled.join(", ")
        ));
    }
}

/// Run spectrum, ratio and decomposition on one operator's correlators, as far as the plan
/// goes. `results` holds the optimised run so far (its settings-dependent parts are reused).
pub(super) fn compare(
    plan: &Plan,
    rplan: &ResamplePlan,
    single: (String, TwoPointData, ThreePointData),
    results: &RunResults,
    rec: &mut Recorder,
) -> Result<Comparison> {
    let spec = &plan.spec;
    let (operator, two, mut three) = single;
    let settings = spectrum::SpectrumSettings {
        gevp: None,
        ..spectrum_settings(plan, &two, &three)?
    };
    let sp = spectrum::run(&two, rplan, &settings)?;
    for w in &sp.warnings {
        rec.warn(format!("comparison `{operator}` spectrum: {w}"));
    }
    skip_dropped_momenta(&mut three, &sp.dropped, rec);
    let mut out = Comparison {
        operator,
        spectrum: sp,
        channels: None,
        form_factors: Vec::new(),
    };
    if !plan.runs(Stage::Ratio) {
        return Ok(out);
    }
    let states = two_point_states(&out.spectrum, rec);
    let channels =
        ratio::analyse_all_consuming(three, two, rplan, &states, &spec.excited_states, &|_, _| {})?;
    if plan.runs(Stage::Decomposition) {
        let mut view = results.clone();
        view.spectrum = Some(out.spectrum.clone());
        view.channels = Some(channels.clone());
        out.form_factors = decompose_all(plan, &view, rec)?;
    }
    out.channels = Some(channels);
    Ok(out)
}

//! The final results of a run: every form factor at every shell and every derived quantity,
//! each averaged over the analysis variants the run computed ([`crate::error_budget`]). This
//! module only gathers the variants from the run's results; the averaging rule lives in
//! `error_budget`.

pub use super::results::FinalRow;

use super::results::RunResults;
use crate::error_budget::{self, Variant};
use crate::kinematics::FormFactor;
use crate::ratio::formfactor_check::{self, FfComparison};
use crate::ratio::Estimator;
use std::collections::BTreeMap;

/// The final value of every form factor at every shell (ordered by form factor, then Q²),
/// then of every derived quantity; `pin` fixes one estimator.
pub fn final_results(results: &RunResults, pin: Option<Estimator>) -> Vec<FinalRow> {
    let mut out = Vec::new();
    // The statistical errors' degrees of freedom come from the bins (error_budget: Student t).
    let bins = results.data.as_ref().map(|d| d.n_bins);
    let shells = shells(results);
    let mut ff_rows = Vec::new();
    for ((ff, shell), idx) in shells {
        let rows: Vec<_> = idx.iter().map(|&i| &results.form_factors[i]).collect();
        let variants: Vec<Variant> = rows
            .iter()
            .map(|r| Variant {
                estimator: r.method,
                model: String::new(),
                value: r.value.value.clone(),
                z_relative: relative(r.value.error_z, r.value.value.central),
            })
            .collect();
        if let Some(b) = error_budget::final_value(&variants, pin, bins) {
            let r = rows[0];
            ff_rows.push(FinalRow {
                quantity: ff.name().to_string(),
                shell: Some(shell),
                q2: Some((r.q2.central, r.q2_gev2.as_ref().map(|q| q.central))),
                unit: String::new(),
                budget: b,
            });
        }
    }
    ff_rows.sort_by(|a, b| {
        let q = |r: &FinalRow| r.q2.map_or(0.0, |q| q.0);
        a.quantity.cmp(&b.quantity).then(q(a).total_cmp(&q(b)))
    });
    out.extend(ff_rows);
    let mut derived: Vec<(&str, Vec<usize>)> = Vec::new();
    for (i, d) in results.derived.iter().enumerate() {
        match derived.iter_mut().find(|(q, _)| *q == d.quantity) {
            Some((_, idx)) => idx.push(i),
            None => derived.push((d.quantity.as_str(), vec![i])),
        }
    }
    for (quantity, idx) in derived {
        let variants: Vec<Variant> = idx
            .iter()
            .map(|&i| {
                let d = &results.derived[i];
                let z_abs = (d.error_total.powi(2) - d.value.error().powi(2))
                    .max(0.0)
                    .sqrt();
                Variant {
                    estimator: d.method,
                    model: d.model.clone(),
                    value: d.value.clone(),
                    z_relative: relative(z_abs, d.value.central),
                }
            })
            .collect();
        if let Some(b) = error_budget::final_value(&variants, pin, bins) {
            out.push(FinalRow {
                quantity: quantity.to_string(),
                shell: None,
                q2: None,
                unit: results.derived[idx[0]].unit.clone(),
                budget: b,
            });
        }
    }
    out
}

fn relative(error: f64, value: f64) -> f64 {
    if value != 0.0 && error.is_finite() {
        (error / value).abs()
    } else {
        0.0
    }
}

/// The estimator comparisons of one form factor at one shell
/// ([`crate::ratio::formfactor_check`]).
#[derive(Clone, Debug)]
pub struct ShellCheck {
    /// The form factor.
    pub form_factor: FormFactor,
    /// Shell label.
    pub shell: String,
    /// Q² of the shell (lattice units, central value of the first estimator).
    pub q2: f64,
    /// The comparisons, reference rows first, then the trend in `tsep`.
    pub rows: Vec<FfComparison>,
}

/// The cross-check of every form factor at every shell, ordered like the final values (by
/// form factor, then Q²).
pub fn formfactor_checks(results: &RunResults) -> Vec<ShellCheck> {
    let shells = shells(results);
    let mut out: Vec<ShellCheck> = shells
        .into_iter()
        .map(|((form_factor, shell), idx)| {
            let estimates: Vec<(Estimator, &crate::resample::Resampled)> = idx
                .iter()
                .map(|&i| {
                    let r = &results.form_factors[i];
                    (r.method, &r.value.value)
                })
                .collect();
            ShellCheck {
                form_factor,
                shell,
                q2: results.form_factors[idx[0]].q2.central,
                rows: formfactor_check::check(&estimates),
            }
        })
        .collect();
    out.sort_by(|a, b| {
        (a.form_factor.name().cmp(b.form_factor.name())).then(a.q2.total_cmp(&b.q2))
    });
    out
}

/// The indices of `results.form_factors` per form factor and shell.
fn shells(results: &RunResults) -> BTreeMap<(FormFactor, String), Vec<usize>> {
    let mut shells: BTreeMap<(FormFactor, String), Vec<usize>> = BTreeMap::new();
    for (i, r) in results.form_factors.iter().enumerate() {
        shells
            .entry((r.form_factor, r.shell.clone()))
            .or_default()
            .push(i);
    }
    shells
}

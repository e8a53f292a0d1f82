//! The final results: `final` (one row per quantity with its error budget) and
//! `final_variants` (every analysis variant with its weight, or why it has none).

use super::cells::float;
use crate::pipeline::final_results::FinalRow;
use crate::pipeline::run::RunResults;
use crate::report::{value_errors, Cell, Table};
use crate::Result;

/// `final`: value, statistical and systematic parts, total, the rule and `value(stat)(sys)`.
pub(super) fn final_table(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "quantity",
            "shell",
            "q2_lat",
            "q2_gev2",
            "value",
            "error_stat",
            "error_excited_states",
            "error_fit_range",
            "error_q2_model",
            "error_renormalization",
            "error_sys",
            "error_total",
            "unit",
            "n_variants",
            "n_used",
            "rule",
            "quoted",
        ],
    );
    for r in &results.final_results {
        let b = &r.budget;
        t.push_row(vec![
            Cell::from(r.quantity.as_str()),
            Cell::from(r.shell.clone().unwrap_or_default()),
            float(r.q2.map_or(f64::NAN, |q| q.0)),
            float(r.q2.and_then(|q| q.1).unwrap_or(f64::NAN)),
            float(b.value.central),
            float(b.stat),
            float(b.excited_states),
            float(b.fit_range),
            float(b.q2_model),
            float(b.renormalization),
            float(b.sys()),
            float(b.total()),
            Cell::from(r.unit.as_str()),
            Cell::from(b.variants.len()),
            Cell::from(b.n_used()),
            Cell::from(b.rule.to_string()),
            Cell::from(quoted(r)),
        ])?;
    }
    Ok(t)
}

/// `final_variants`: every variant of every final value with its weight.
pub(super) fn final_variants(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "quantity", "shell", "method", "model", "value", "error", "weight", "excluded",
        ],
    );
    for r in &results.final_results {
        for w in &r.budget.variants {
            t.push_row(vec![
                Cell::from(r.quantity.as_str()),
                Cell::from(r.shell.clone().unwrap_or_default()),
                Cell::from(w.variant.estimator.to_string()),
                Cell::from(w.variant.model.as_str()),
                float(w.variant.value.central),
                float(w.variant.value.error()),
                float(w.weight),
                Cell::from(w.excluded.clone().unwrap_or_default()),
            ])?;
        }
    }
    Ok(t)
}

/// `value(stat)(sys)` of one final row.
pub fn quoted(r: &FinalRow) -> String {
    value_errors(r.budget.value.central, &[r.budget.stat, r.budget.sys()])
}

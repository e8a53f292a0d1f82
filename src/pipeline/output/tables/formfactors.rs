//! The form-factor tables: one row per estimator, form factor and Q² shell; the quantities
//! derived from the Q² fits; their per-resample values; and the compact summary (Q² by
//! estimator) shown on the terminal and at the top of the report.

use super::cells::{float, opt};
use crate::pipeline::run::{FormFactorRow, RunResults};
use crate::ratio::Estimator;
use crate::report::{samples_table, value_error, Cell, Table};
use crate::resample::Resampled;
use crate::Result;
use std::collections::BTreeMap;

/// `formfactors`: one row per estimator, form factor and Q² shell.
pub(super) fn formfactors(name: &str, rows: &[FormFactorRow]) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "method",
            "form_factor",
            "q2_lat",
            "q2_gev2",
            "value",
            "error_stat",
            "error_z",
            "error_total",
            "n_channels",
            "chi2_dof",
            "current",
            "shell",
            "condition",
        ],
    );
    for r in rows {
        t.push_row(vec![
            Cell::from(r.method.to_string()),
            Cell::from(r.form_factor.name()),
            float(r.q2.central),
            opt(r.q2_gev2.as_ref().map(|q| q.central)),
            float(r.value.value.central),
            float(r.value.error_stat),
            float(r.value.error_z),
            float(r.value.error_total),
            Cell::from(r.n_channels),
            opt(r.chi2_dof),
            Cell::from(format!("{:?}", r.kind).to_lowercase()),
            Cell::from(r.shell.as_str()),
            float(r.condition),
        ])?;
    }
    Ok(t)
}

/// `derived`: quantities from the Q² fits.
pub(super) fn derived(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &["method", "model", "quantity", "value", "error", "unit"],
    );
    for d in &results.derived {
        t.push_row(vec![
            Cell::from(d.method.to_string()),
            Cell::from(d.model.as_str()),
            Cell::from(d.quantity.as_str()),
            float(d.value.central),
            float(d.error_total),
            Cell::from(d.unit.as_str()),
        ])?;
    }
    Ok(t)
}

/// `formfactor_samples`: every form factor per resample, labelled `method|form_factor|shell`.
pub(super) fn formfactor_samples(name: &str, results: &RunResults) -> Table {
    let labels: Vec<String> = results
        .form_factors
        .iter()
        .map(|r| format!("{}|{}|{}", r.method, r.form_factor.name(), r.shell))
        .collect();
    let items: Vec<(&str, &Resampled)> = labels
        .iter()
        .zip(&results.form_factors)
        .map(|(l, r)| (l.as_str(), &r.value.value))
        .collect();
    samples_table(name, &items)
}

/// `derived_samples`: every derived quantity per resample, labelled `method|model|quantity`.
pub(super) fn derived_samples(name: &str, results: &RunResults) -> Table {
    let labels: Vec<String> = results
        .derived
        .iter()
        .map(|d| format!("{}|{}|{}", d.method, d.model, d.quantity))
        .collect();
    let items: Vec<(&str, &Resampled)> = labels
        .iter()
        .zip(&results.derived)
        .map(|(l, d)| (l.as_str(), &d.value))
        .collect();
    samples_table(name, &items)
}

/// The summary: form factors per shell (rows, ordered by Q²) and estimator (columns),
/// `value(error)` with the total error. Rows are keyed by shell, never by Q² alone: shells of
/// equal Q² (rest and moving frames) are different measurements.
pub fn summary_table(results: &RunResults) -> Table {
    let mut methods: Vec<Estimator> = Vec::new();
    for r in &results.form_factors {
        if !methods.contains(&r.method) {
            methods.push(r.method);
        }
    }
    let labels: Vec<String> = methods.iter().map(Estimator::to_string).collect();
    let mut cols = vec!["form_factor", "shell", "Q2_GeV2"];
    cols.extend(labels.iter().map(String::as_str));
    let mut t = Table::new("summary", &cols);
    type Row = (f64, BTreeMap<Estimator, String>);
    let mut cells: BTreeMap<(String, String), Row> = BTreeMap::new();
    for r in &results.form_factors {
        let q2 = r.q2_gev2.as_ref().map_or(r.q2.central, |q| q.central);
        let key = (r.form_factor.name().to_string(), r.shell.clone());
        let entry = cells.entry(key).or_insert((q2, BTreeMap::new()));
        entry.1.insert(
            r.method,
            value_error(r.value.value.central, r.value.error_total),
        );
    }
    let mut rows: Vec<_> = cells.into_iter().collect();
    rows.sort_by(|a, b| a.0 .0.cmp(&b.0 .0).then(a.1 .0.total_cmp(&b.1 .0)));
    for ((ff, shell), (q2, by_method)) in rows {
        let mut row = vec![
            Cell::from(ff),
            Cell::from(shell),
            Cell::Text(format!("{q2:.4}")),
        ];
        row.extend(
            methods
                .iter()
                .map(|m| Cell::Text(by_method.get(m).cloned().unwrap_or_default())),
        );
        t.rows.push(row);
    }
    t
}

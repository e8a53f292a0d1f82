//! The short text printed on the terminal after a run: first the final values with their
//! error budget and the count of plateau form factors flagged as biased, then the form factors by shell and estimator, the derived quantities (or,
//! for a run stopped after the ratio, the cross-check), the warning count and where the
//! report is, and what data were analysed (configurations, bins, every configuration
//! dropped).

use super::tables::{quoted, summary_table};
use crate::pipeline::run::{DataSummary, RunResults};
use crate::report::{render_text, value_error, Cell, Table};
use std::path::{Component, Path, PathBuf};

/// Text for the terminal after a run.
pub fn terminal_summary(results: &RunResults) -> String {
    let mut out = String::new();
    if !results.final_results.is_empty() {
        out.push_str(&render_text(&final_summary(results), 60));
        if let Some(r) = results.final_results.first() {
            out.push_str(&format!(
                "final values: {}; errors (stat)(sys), sys = excited states, fit range, Q² model, Z in quadrature\n\n",
                r.budget.rule
            ));
        }
        let checks = crate::pipeline::final_results::formfactor_checks(results);
        let t = crate::ratio::formfactor_check::tally(checks.iter().flat_map(|c| &c.rows));
        if t.plateaus > 0 {
            out.push_str(&format!(
                "plateau form factors flagged as biased by excited states: {} of {} \
                 (formfactor_crosscheck.csv)\n\n",
                t.biased, t.plateaus
            ));
        }
    }
    if results.form_factors.is_empty() && results.channels.is_some() {
        out.push_str(&render_text(&crosscheck_summary(results), 60));
    }
    if !results.form_factors.is_empty() {
        out.push_str(&render_text(&summary_table(results), 60));
    }
    if !results.derived.is_empty() {
        let mut t = Table::new("derived", &["method", "model", "quantity", "value", "unit"]);
        for d in &results.derived {
            t.rows.push(vec![
                Cell::from(d.method.to_string()),
                Cell::from(d.model.as_str()),
                Cell::from(d.quantity.as_str()),
                Cell::Text(value_error(d.value.central, d.error_total)),
                Cell::from(d.unit.as_str()),
            ]);
        }
        out.push_str(&render_text(&t, 40));
    }
    if results.final_results.is_empty() {
        out.push_str(&format!("final method: {}\n", results.final_method));
    }
    if let Some(d) = &results.data {
        out.push_str(&data_line(d));
    }
    if !results.warnings.is_empty() {
        out.push_str(&format!(
            "{} warning(s); see manifest.json and report.html\n",
            results.warnings.len()
        ));
    }
    if let Some(dir) = &results.run_dir {
        let report = tidy_for_display(&dir.join("report.html"));
        out.push_str(&format!("report: {}\n", report.display()));
    }
    out
}

/// What was analysed, and every configuration left out with the reason (the full lists are
/// in manifest.json).
fn data_line(d: &DataSummary) -> String {
    let mut line = format!(
        "data: {} configurations in {} bins, {} resamples",
        d.n_configs, d.n_bins, d.n_samples
    );
    for (list, why) in [
        (&d.dropped_not_in_both, "not in both tables"),
        (&d.dropped_by_binning, "in an incomplete last bin"),
    ] {
        if !list.is_empty() {
            let shown: Vec<String> = list.iter().take(10).map(|c| c.to_string()).collect();
            let more = if list.len() > 10 { ", …" } else { "" };
            line.push_str(&format!(
                "; dropped {} {why} ({}{more})",
                list.len(),
                shown.join(", ")
            ));
        }
    }
    line.push('\n');
    line
}

/// The final values: one row per quantity (form factors by shell), `value(stat)(sys)` and
/// the systematic parts.
pub(super) fn final_summary(results: &RunResults) -> Table {
    let mut t = Table::new(
        "final",
        &[
            "quantity", "shell", "Q2_GeV2", "value", "exc", "fit", "model", "Z", "used", "unit",
        ],
    );
    let short = |x: f64| Cell::Text(crate::report::table::significant(x, 2));
    for r in &results.final_results {
        let b = &r.budget;
        t.rows.push(vec![
            Cell::from(r.quantity.as_str()),
            Cell::from(r.shell.clone().unwrap_or_default()),
            Cell::Text(
                r.q2.and_then(|q| q.1)
                    .map_or(String::new(), |q| format!("{q:.4}")),
            ),
            Cell::Text(quoted(r)),
            short(b.excited_states),
            short(b.fit_range),
            short(b.q2_model),
            short(b.renormalization),
            Cell::Text(format!("{}/{}", b.n_used(), b.variants.len())),
            Cell::from(r.unit.as_str()),
        ]);
    }
    t
}

/// For a run that stopped before the form factors: per estimator, how many channel
/// comparisons of the cross-check are consistent, 1–2 sigma apart or more than 2 sigma apart.
pub(super) fn crosscheck_summary(results: &RunResults) -> Table {
    use std::collections::BTreeMap;
    let mut counts: BTreeMap<(String, String), [usize; 3]> = BTreeMap::new();
    for c in results.channels.iter().flat_map(|m| m.values()) {
        for row in &c.crosscheck {
            let e = counts
                .entry((row.method.to_string(), row.reference.to_string()))
                .or_default();
            e[row.flag as usize] += 1;
        }
    }
    let mut t = Table::new(
        "crosscheck",
        &[
            "method",
            "reference",
            "consistent",
            "1-2 sigma",
            "above 2 sigma",
        ],
    );
    for ((m, r), n) in counts {
        t.rows.push(vec![
            Cell::from(m),
            Cell::from(r),
            Cell::from(n[0]),
            Cell::from(n[1]),
            Cell::from(n[2]),
        ]);
    }
    t
}

/// `a/b/../c` shown as `a/c`. For display only: files are opened with the path as resolved,
/// since lexical clean-up is wrong where a directory is a symbolic link.
fn tidy_for_display(p: &Path) -> PathBuf {
    let mut out = PathBuf::new();
    for c in p.components() {
        match c {
            Component::ParentDir
                if matches!(out.components().next_back(), Some(Component::Normal(_))) =>
            {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other),
        }
    }
    out
}

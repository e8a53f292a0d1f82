//! The short text printed on the terminal after a run: first the final values with their
//! error budget and the count of plateau form factors flagged as biased, then the form factors by shell and estimator, the derived quantities (or,
//! for a run stopped after the ratio, the cross-check), the warning count and where the
//! report is, and what data were analysed (configurations, bins, every configuration
//! dropped).

use super::tables::{quoted, summary_table};
use crate::pipeline::run::{DataSummary, RunResults};
use crate::ratio::Estimator;
use crate::report::{render_text, value_error, Cell, Table};
use std::collections::BTreeMap;
use std::path::{Component, Path, PathBuf};

/// The final method of a run without final values, with the channels where another method
/// stood in for it (their ratio plots and final estimates; the run's warnings say why), from
/// the estimator each channel used.
fn final_method_line(wanted: Estimator, used: impl Iterator<Item = Estimator>) -> String {
    let mut stood_in: BTreeMap<String, usize> = BTreeMap::new();
    for e in used.filter(|e| e.kind() != wanted.kind()) {
        *stood_in.entry(e.kind().to_string()).or_default() += 1;
    }
    if stood_in.is_empty() {
        return format!("final method: {wanted}\n");
    }
    let list: Vec<String> = stood_in
        .iter()
        .map(|(e, n)| format!("{e} on {n} channel(s)"))
        .collect();
    format!(
        "final method: {wanted} ({} stood in for it; see the warnings)\n",
        list.join(", ")
    )
}

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
        let used = results.channels.iter().flat_map(|c| c.values());
        out.push_str(&final_method_line(
            results.final_method,
            used.map(|c| c.final_method),
        ));
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn final_method_line_names_the_methods_that_stood_in() {
        let two = Estimator::TwoState;
        let all_ran = [two, two].into_iter();
        assert_eq!(final_method_line(two, all_ran), "final method: two_state\n");
        let used = [
            two,
            Estimator::Summation,
            Estimator::plateau_at(12),
            Estimator::plateau_at(14),
        ];
        assert_eq!(
            final_method_line(two, used.into_iter()),
            "final method: two_state (plateau on 2 channel(s), summation on 1 channel(s) stood \
             in for it; see the warnings)\n"
        );
        // A plateau made concrete per channel is still the plateau.
        let plateau = Estimator::Plateau { tsep: None };
        let used = [Estimator::plateau_at(8), Estimator::plateau_at(14)];
        assert_eq!(
            final_method_line(plateau, used.into_iter()),
            "final method: plateau\n"
        );
    }
}

//! The short text printed on the terminal after a run: the form factors by Q² and
//! estimator, the derived quantities, the final estimator, the warning count and where the
//! report is.

use super::tables::summary_table;
use crate::pipeline::run::RunResults;
use crate::report::{render_text, value_error, Cell, Table};
use std::path::{Component, Path, PathBuf};

/// Text for the terminal after a run.
pub fn terminal_summary(results: &RunResults) -> String {
    let mut out = String::new();
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
                Cell::Text(value_error(d.value.central, d.error)),
                Cell::from(d.unit.as_str()),
            ]);
        }
        out.push_str(&render_text(&t, 40));
    }
    out.push_str(&format!("final method: {}\n", results.final_method));
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

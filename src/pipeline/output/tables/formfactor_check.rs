//! `formfactor_crosscheck`: the estimators of every form factor at every Q² shell compared
//! with the reference and along `tsep`, with the plateau verdicts
//! ([`crate::ratio::formfactor_check`]).

use super::cells::float;
use crate::pipeline::final_results::formfactor_checks;
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};
use crate::Result;

/// One row per comparison: each plateau and the summation against the reference, each
/// plateau against the next smaller separation; a plateau's reference row carries its
/// verdict (`biased`, `reason`).
pub(super) fn formfactor_crosscheck(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "form_factor",
            "shell",
            "q2_lat",
            "comparison",
            "method",
            "reference",
            "value",
            "own_error",
            "difference",
            "error",
            "sigma",
            "flag",
            "distance",
            "biased",
            "reason",
        ],
    );
    for s in formfactor_checks(results) {
        for r in &s.rows {
            let d = r.difference.as_ref();
            t.push_row(vec![
                Cell::from(s.form_factor.name()),
                Cell::from(s.shell.as_str()),
                float(s.q2),
                Cell::from(r.comparison.name()),
                Cell::from(r.method.to_string()),
                Cell::from(r.reference.map(|e| e.to_string()).unwrap_or_default()),
                float(r.value),
                float(r.own_error),
                float(d.map_or(f64::NAN, |d| d.value.central)),
                float(d.map_or(f64::NAN, |d| d.error)),
                float(d.map_or(f64::NAN, |d| d.sigma)),
                Cell::from(r.flag().map_or("", |f| f.name())),
                float(r.distance),
                Cell::from(match &r.verdict {
                    Some(v) if v.biased() => "yes",
                    Some(_) => "no",
                    None => "",
                }),
                Cell::from(
                    r.verdict
                        .as_ref()
                        .map(|v| v.reason(r.reference))
                        .unwrap_or_default(),
                ),
            ])?;
        }
    }
    Ok(t)
}

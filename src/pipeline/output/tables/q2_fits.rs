//! The Q² fit table: every fitted parameter of every Q² fit (estimator, form factor, model)
//! with its resampled error and the fit's quality, so a fit can be judged and its curve
//! redrawn without rerunning it.

use super::cells::{float, opt};
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};
use crate::Result;

/// `q2_fits`: one row per estimator, form factor, Q² model and parameter. `value` is the
/// central fit, `error` the resampled error; `chi2` (prior terms included), `dof`,
/// `chi2_dof`, `p_value` and `n_points` describe the central fit, `n_failed` counts the
/// resample fits that did not converge. Parameters are in lattice units of Q².
pub(super) fn q2_fits(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "method",
            "form_factor",
            "model",
            "parameter",
            "value",
            "error",
            "chi2",
            "dof",
            "chi2_dof",
            "p_value",
            "n_points",
            "n_failed",
        ],
    );
    for f in &results.q2_fits {
        for (parameter, value) in f.fit.names.iter().zip(&f.fit.params) {
            t.push_row(vec![
                Cell::from(f.method.to_string()),
                Cell::from(f.form_factor.name()),
                Cell::from(f.model.as_str()),
                Cell::from(parameter.as_str()),
                float(value.central),
                float(value.error()),
                float(f.fit.chi2),
                Cell::from(f.fit.dof),
                opt(f.fit.chi2_dof()),
                float(f.fit.p_value),
                Cell::from(f.fit.n_points),
                Cell::from(f.fit.n_failed),
            ])?;
        }
    }
    Ok(t)
}

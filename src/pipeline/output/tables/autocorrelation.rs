//! The autocorrelation tables: the integrated autocorrelation time of a few representative
//! data points, and the error of their means against the bin size.

use super::cells::{float, opt};
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};
use crate::resample::autocorr_check::bins_too_small;
use crate::Result;

/// `autocorrelation`: per representative point, `tau_int` (Gamma method) with its error and
/// window, the naive error of the mean, the Gamma-method error, the binned error at the run's
/// bin size, and whether those bins span about `2 tau_int`; then one row per table for
/// `tau_int` of the binned data pooled over all its time series
/// ([`crate::resample::inflation`]), with the inflation applied for it in the note.
pub(super) fn autocorrelation(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "point",
            "n_configs",
            "tau_int",
            "tau_int_error",
            "window",
            "naive_sigma",
            "gamma_sigma",
            "bin_size",
            "binned_sigma",
            "bins_long_enough",
            "note",
        ],
    );
    let Some(d) = &results.data else {
        return Ok(t);
    };
    for p in &d.autocorrelation {
        let naive = p.binning.first().map(|b| b.error);
        let binned = p
            .binning
            .iter()
            .find(|b| b.bin_size == d.bin_size)
            .map(|b| b.error);
        let (tau, tau_err, window, gamma, enough, note) = match &p.result {
            Ok(r) => (
                float(r.tau_int),
                float(r.tau_int_error),
                Cell::from(r.window),
                float(r.error),
                if bins_too_small(d.bin_size, r.tau_int, r.tau_int_error) {
                    "no"
                } else {
                    "yes"
                },
                r.warnings.join("; "),
            ),
            Err(e) => (
                opt(None),
                opt(None),
                Cell::Text(String::new()),
                opt(None),
                "unknown",
                e.clone(),
            ),
        };
        t.push_row(vec![
            Cell::Text(p.point.clone()),
            Cell::from(p.n),
            tau,
            tau_err,
            window,
            opt(naive),
            gamma,
            Cell::from(d.bin_size),
            opt(binned),
            Cell::from(enough),
            Cell::Text(note),
        ])?;
    }
    binned_rows(&mut t, d)?;
    Ok(t)
}

/// The rows of the binned tables' pooled `tau_int`: `bins_long_enough` is "no" when it
/// exceeds 1/2 by more than its error.
fn binned_rows(t: &mut Table, d: &crate::pipeline::results::DataSummary) -> Result<()> {
    let b = &d.binned_autocorrelation;
    for (table, r) in [("two-point", &b.twopt), ("three-point", &b.threept)] {
        let inflated = d
            .inflation
            .map(|f| format!("resampled deviations inflated by {f:.4}"));
        let (tau, tau_err, window, enough, n, note) = match r {
            Ok(r) => (
                float(r.tau_int),
                float(r.tau_int_error),
                Cell::from(r.window),
                if r.tau_int - r.tau_int_error > 0.5 {
                    "no"
                } else {
                    "yes"
                },
                Cell::from(r.n),
                [Some(format!("{} time series pooled", r.chains)), inflated]
                    .into_iter()
                    .flatten()
                    .chain(r.warnings.iter().cloned())
                    .collect::<Vec<_>>()
                    .join("; "),
            ),
            Err(e) => (
                opt(None),
                opt(None),
                Cell::Text(String::new()),
                "unknown",
                Cell::from(d.n_bins),
                e.clone(),
            ),
        };
        t.push_row(vec![
            Cell::Text(format!("binned {table} data")),
            n,
            tau,
            tau_err,
            window,
            opt(None),
            opt(None),
            Cell::from(d.bin_size),
            opt(None),
            Cell::from(enough),
            Cell::Text(note),
        ])?;
    }
    Ok(())
}

/// `binning_study`: per representative point and bin size, the number of bins, the naive
/// error of the bin means and its ratio to the unbinned error (it levels off near
/// `sqrt(2 tau_int)` once the bins are long enough).
pub(super) fn binning_study(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &["point", "bin_size", "n_bins", "sigma", "ratio_to_unbinned"],
    );
    let Some(d) = &results.data else {
        return Ok(t);
    };
    for p in &d.autocorrelation {
        let Some(unbinned) = p.binning.first().map(|b| b.error) else {
            continue;
        };
        for b in &p.binning {
            t.push_row(vec![
                Cell::Text(p.point.clone()),
                Cell::from(b.bin_size),
                Cell::from(p.n / b.bin_size),
                float(b.error),
                float(b.error / unbinned),
            ])?;
        }
    }
    Ok(t)
}

//! Form factors versus Q², one chart per form factor: every estimator's points (in its fixed
//! colour and marker), and the final estimator's Q² fits as bands over the range of the data.
//! A point whose error bar would flatten the others is cut at the axis and marked.

use super::figure::Figure;
use super::style::{estimator_style, form_factor, FINAL_COLOUR};
use crate::kinematics::HBARC_GEV_FM;
use crate::pipeline::plan::Plan;
use crate::pipeline::run::{FormFactorRow, RunResults};
use crate::pipeline::spec::Plot;
use crate::ratio::Estimator;
use crate::report::{Chart, Series};
use crate::resample::Resampled;
use std::collections::BTreeMap;

/// `formfactor-<name>`: one chart per form factor.
pub(super) fn charts(plan: &Plan, results: &RunResults) -> Vec<Figure> {
    let to_gev2 = (HBARC_GEV_FM / plan.spec.ensemble.spacing_fm).powi(2);
    // estimators in their own order: plateaus by tsep, summation, two-state
    let mut by_ff: BTreeMap<&str, BTreeMap<Estimator, Vec<&FormFactorRow>>> = BTreeMap::new();
    for r in &results.form_factors {
        by_ff
            .entry(r.form_factor.name())
            .or_default()
            .entry(r.method)
            .or_default()
            .push(r);
    }
    by_ff
        .into_iter()
        .map(|(ff, methods)| {
            let mut chart = Chart {
                title: format!("{} versus Q^{{2}}", form_factor(ff)),
                x_label: "Q^{2} (GeV^{2})".into(),
                y_label: form_factor(ff),
                ..Chart::default()
            };
            for (i, (m, rows)) in methods.into_iter().enumerate() {
                let q = |r: &FormFactorRow| r.q2_gev2.as_ref().map_or(r.q2.central, |q| q.central);
                let (colour, marker) = estimator_style(m);
                chart.series.push(
                    Series::points(
                        m.to_string(),
                        colour,
                        rows.iter().map(|r| q(r)).collect(),
                        rows.iter().map(|r| r.value.value.central).collect(),
                        rows.iter().map(|r| r.value.error_total).collect(),
                    )
                    .marker(marker)
                    .offset(0.004 * i as f64),
                );
            }
            let q_max = results
                .form_factors
                .iter()
                .filter(|r| r.form_factor.name() == ff)
                .map(|r| r.q2.central)
                .fold(0.0, f64::max);
            let fits = results
                .q2_fits
                .iter()
                .filter(|f| f.form_factor.name() == ff && f.method == results.final_method);
            for (j, f) in fits.enumerate() {
                let grid: Vec<f64> = (0..=40).map(|i| q_max * i as f64 / 40.0).collect();
                let vals: Vec<Resampled> = grid.iter().map(|q| f.fit.evaluate(*q)).collect();
                chart.series.push(Series::band(
                    format!("{} {}", f.method, f.model),
                    [FINAL_COLOUR, 6][j % 2],
                    grid.iter().map(|q| q * to_gev2).collect(),
                    vals.iter().map(|v| v.central - v.error()).collect(),
                    vals.iter().map(|v| v.central + v.error()).collect(),
                ));
            }
            Figure::new(Plot::FormFactors, format!("formfactor-{ff}"), chart)
        })
        .collect()
}

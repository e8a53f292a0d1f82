//! The variants behind each final value: one chart per derived quantity and per form factor
//! at its lowest-Q² shell, each variant a point with its statistical error, its weight in the
//! legend, and the final value with its total error as a band.

use super::Figure;
use crate::pipeline::final_results::FinalRow;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::report::{Chart, Series};

/// `final-<quantity>[-<shell>]`: the variants of one final value and their weights.
pub(super) fn charts(results: &RunResults) -> Vec<Figure> {
    let mut seen = Vec::new();
    results
        .final_results
        .iter()
        .filter(|r| {
            // form factors: the first (lowest-Q²) shell only
            r.shell.is_none() || {
                let first = !seen.contains(&r.quantity);
                seen.push(r.quantity.clone());
                first
            }
        })
        .map(chart)
        .collect()
}

fn chart(r: &FinalRow) -> Figure {
    let b = &r.budget;
    let name = match &r.shell {
        Some(s) => format!("final-{}-{}", r.quantity, file_safe(s)),
        None => format!("final-{}", file_safe(&r.quantity)),
    };
    let what = match &r.shell {
        Some(s) => format!("{} at shell {s}", r.quantity),
        None => r.quantity.clone(),
    };
    let mut chart = Chart {
        title: format!("{what}: variants and weights ({})", b.rule),
        x_label: "variant".into(),
        y_label: if r.unit.is_empty() {
            r.quantity.clone()
        } else {
            format!("{} ({})", r.quantity, r.unit)
        },
        ..Chart::default()
    };
    let n = b.variants.len() as f64;
    let (v, t) = (b.value.central, b.total());
    chart.series.push(Series::band(
        format!("final, total error ({})", b.rule),
        8,
        vec![0.5, n + 0.5],
        vec![v - t, v - t],
        vec![v + t, v + t],
    ));
    for (i, w) in b.variants.iter().enumerate() {
        let label = match &w.excluded {
            Some(why) => format!(
                "{} {}: excluded, {why}",
                w.variant.estimator, w.variant.model
            ),
            None => format!(
                "{} {}: weight {:.2}",
                w.variant.estimator, w.variant.model, w.weight
            ),
        };
        chart.series.push(Series::points(
            label,
            i,
            vec![i as f64 + 1.0],
            vec![w.variant.value.central],
            vec![w.variant.value.error()],
        ));
    }
    Figure::new(Plot::FinalVariants, name, chart)
}

fn file_safe(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

//! The variants behind each final value: one chart per derived quantity and per form factor
//! at its lowest-Q² shell, each variant a point with its statistical error, its weight in the
//! legend, and the final value with its total error as a band.

use super::style::{axis_label, estimator_style, file_safe, quantity, FINAL_COLOUR};
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
        Some(s) => format!("{} at shell {s}", quantity(&r.quantity)),
        None => quantity(&r.quantity),
    };
    let mut chart = Chart {
        title: format!("{what}: variants and weights"),
        x_label: "variant".into(),
        y_label: axis_label(&r.quantity, &r.unit),
        size: (800, 400),
        integer_x: true,
        ..Chart::default()
    };
    let n = b.variants.len() as f64;
    let (v, t) = (b.value.central, b.total());
    chart.series.push(Series::band(
        format!("final, total error ({})", b.rule),
        FINAL_COLOUR,
        vec![0.5, n + 0.5],
        vec![v - t, v - t],
        vec![v + t, v + t],
    ));
    for (i, w) in b.variants.iter().enumerate() {
        let name = format!("{} {}", w.variant.estimator, w.variant.model);
        let name = name.trim_end();
        let label = match &w.excluded {
            Some(why) => format!("{name}: excluded, {why}"),
            None => format!("{name}: weight {:.2}", w.weight),
        };
        let (colour, marker) = estimator_style(w.variant.estimator);
        chart.series.push(
            Series::points(
                label,
                colour,
                vec![i as f64 + 1.0],
                vec![w.variant.value.central],
                vec![w.variant.value.error()],
            )
            .marker(marker),
        );
    }
    Figure::new(Plot::FinalVariants, name, chart)
}

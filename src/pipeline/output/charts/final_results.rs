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
        // wide enough that the legend column holds a variant, its weight or why it has none
        size: (960, 400),
        integer_x: true,
        ..Chart::default()
    };
    let n = b.variants.len() as f64;
    let (v, t) = (b.value.central, b.total());
    chart.series.push(Series::band(
        // the rule itself is stated above the budget table
        "final value, total error".to_string(),
        FINAL_COLOUR,
        vec![0.5, n + 0.5],
        vec![v - t, v - t],
        vec![v + t, v + t],
    ));
    for (i, w) in b.variants.iter().enumerate() {
        let name = format!("{} {}", w.variant.estimator, w.variant.model);
        let name = name.trim_end();
        let label = match &w.excluded {
            Some(why) => format!("{name}: {}", legend_reason(why)),
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

/// Why a variant has no weight, as short as the legend column needs: the budget's reason
/// without a repeated estimator name, `sigma` as `σ`.
fn legend_reason(why: &str) -> String {
    why.strip_prefix("plateau: ")
        .unwrap_or(why)
        .replace(" sigma ", "σ ")
}

#[cfg(test)]
mod tests {
    use super::legend_reason;

    #[test]
    fn reasons_are_shortened_for_the_legend() {
        assert_eq!(
            legend_reason("a check, 0.5 sigma from two_state_late"),
            "a check, 0.5σ from two_state_late"
        );
        assert_eq!(
            legend_reason("plateau: a check, not averaged"),
            "a check, not averaged"
        );
        assert_eq!(legend_reason("not finite"), "not finite");
    }
}

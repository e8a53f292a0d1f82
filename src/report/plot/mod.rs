//! Publication-style SVG charts from a small, physics-free description: points with error
//! bars, semi-transparent bands, lines and labelled horizontal reference lines, on a linear
//! or logarithmic y axis, with a legend.
//!
//! Drawn with plotters' SVG backend, which writes `<text>` elements and so needs no font
//! files. Colours follow the colour-blind-safe hues of Okabe & Ito ("Color Universal
//! Design", 2008), with marker shapes cycling as well (or set per series), so series stay
//! distinguishable in greyscale print.
//!
//! Every text (title, axis labels, legend, reference labels) may carry sub- and
//! superscripts written `G_{E}` and `Q^{2}`; they become SVG `<tspan>`s ([`markup`]).
//! A linear y axis without a fixed range ignores error bars that would flatten the plot:
//! such bars are cut at the axis and end in an arrow, and the plot says so ([`axes`]).
//!
//! The pieces, each importing only those after it: this file renders, `draw` makes the
//! plotters calls, [`axes`] computes the ranges and tick labels, `chart` holds the chart
//! description (re-exported here), [`markup`] the text markup.

pub mod axes;
mod chart;
mod draw;
pub mod markup;

pub use chart::{Chart, Legend, Marker, ReferenceLine, Series, SeriesKind, PALETTE};

use crate::error::{Error, Result};
use axes::{power_tick, ranges, tick};
use draw::{draw, draw_side_legend, layout};
use plotters::prelude::*;
use std::path::Path;

/// Render `chart` as an SVG document (a string starting with `<svg`).
pub fn render_svg(chart: &Chart) -> Result<String> {
    for s in &chart.series {
        s.check(&chart.title)?;
    }
    let (xr, yr) = ranges(chart);
    let mut buf = String::new();
    {
        let root = SVGBackend::with_string(&mut buf, chart.size).into_drawing_area();
        let ends = (yr.start, yr.end);
        let drawn = layout(chart, &root).and_then(|(body, side)| {
            if let Some(side) = side {
                draw_side_legend(chart, &side)?;
            }
            if chart.log_y {
                let powers = yr.start < 0.01 || yr.end > 1000.0;
                draw(chart, &body, xr, yr.clone().log_scale(), ends, &|v| {
                    if powers {
                        power_tick(v)
                    } else {
                        tick(v)
                    }
                })
            } else {
                draw(chart, &body, xr, yr.clone(), ends, &tick)
            }
        });
        drawn
            .and_then(|()| root.present())
            .map_err(|e| Error::analysis("report", format!("chart `{}`: {e}", chart.title)))?;
    }
    Ok(markup::svg_text(&buf))
}

/// Render `chart` and write the SVG to `path`.
pub fn write_svg(chart: &Chart, path: &Path) -> Result<()> {
    let svg = render_svg(chart)?;
    std::fs::write(path, svg).map_err(|e| Error::io(path, e))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hostile_values_never_panic() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(20261202);
        let specials = [
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            0.0,
            -0.0,
            1e308,
            -1e308,
            1e-310,
            -1e-300,
            1.0,
        ];
        let mut pick = |rng: &mut rand_chacha::ChaCha8Rng| {
            if rng.gen_bool(0.5) {
                specials[rng.gen_range(0..specials.len())]
            } else {
                rng.gen_range(-5.0..5.0)
            }
        };
        for i in 0..60 {
            let n = rng.gen_range(0..5);
            let v =
                |rng: &mut rand_chacha::ChaCha8Rng,
                 pick: &mut dyn FnMut(&mut rand_chacha::ChaCha8Rng) -> f64| {
                    (0..n).map(|_| pick(rng)).collect::<Vec<f64>>()
                };
            let (x, y, e) = (
                v(&mut rng, &mut pick),
                v(&mut rng, &mut pick),
                v(&mut rng, &mut pick),
            );
            let (lo, hi) = (v(&mut rng, &mut pick), v(&mut rng, &mut pick));
            let chart = Chart {
                title: format!("case {i}"),
                log_y: i % 2 == 0,
                series: vec![
                    Series::points("p", i, x.clone(), y.clone(), e),
                    Series::band("b", i + 1, x.clone(), lo, hi),
                    Series::line("l", i + 2, x, y),
                ],
                reference_lines: vec![ReferenceLine {
                    y: pick(&mut rng),
                    label: "r".into(),
                }],
                legend: [Legend::Outside, Legend::UpperLeft][i % 2],
                ..Chart::default()
            };
            let svg = render_svg(&chart).unwrap();
            assert!(svg.starts_with("<svg"), "case {i}");
        }
    }

    #[test]
    fn nothing_is_drawn_outside_a_fixed_range() {
        let chart = Chart {
            y_range: Some((-3.0, 3.0)),
            legend: Legend::Hidden,
            series: vec![Series::points(
                "",
                0,
                vec![1.0, 2.0, 3.0, 4.0],
                vec![0.0, 4.0, -5.0, 2.5],
                vec![0.0, 0.1, 0.1, 1.0],
            )],
            ..Chart::default()
        };
        let svg = render_svg(&chart).unwrap();
        assert_eq!(svg.matches("<circle").count(), 2);
        // One bar (cut at the top edge) with its lower cap only: bar + cap = 2 paths of the
        // series colour beyond the axes' own lines.
        let colour = "#0072B2";
        let n = svg.matches(&format!("stroke=\"{colour}\"")).count();
        assert_eq!(n, 2, "{svg}");

        // A line leaving the range is broken there, not clamped to the edge.
        let chart = Chart {
            y_range: Some((-3.0, 3.0)),
            legend: Legend::Hidden,
            series: vec![Series::line(
                "",
                1,
                vec![1.0, 2.0, 3.0, 4.0, 5.0],
                vec![0.0, 1.0, 9.0, 1.0, 0.0],
            )],
            ..Chart::default()
        };
        let svg = render_svg(&chart).unwrap();
        let pieces = svg
            .lines()
            .filter(|l| l.starts_with("<polyline") && l.contains("#D55E00"));
        assert_eq!(pieces.count(), 2, "{svg}");
    }

    #[test]
    fn length_mismatch_is_an_error() {
        let c = Chart {
            title: "E_eff".into(),
            series: vec![Series::points(
                "p",
                0,
                vec![1.0, 2.0],
                vec![1.0],
                vec![0.1, 0.1],
            )],
            ..Chart::default()
        };
        let err = render_svg(&c).unwrap_err().to_string();
        assert!(err.contains("2 x values but 1 y values"), "{err}");
    }
}

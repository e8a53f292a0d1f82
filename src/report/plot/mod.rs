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
//! The pieces: this file holds the chart description, [`axes`] the ranges and tick labels,
//! `draw` the plotters calls, [`markup`] the text markup.

pub mod axes;
mod draw;
pub mod markup;

use crate::error::{Error, Result};
use axes::{power_tick, ranges, tick};
use draw::{draw, draw_side_legend, layout};
use plotters::prelude::*;
use std::path::Path;

/// The series palette: blue, vermillion, bluish green, reddish purple, orange, sky blue,
/// dark grey, black (Okabe & Ito 2008 hues; their yellow is left out as too faint on white).
pub const PALETTE: [(u8, u8, u8); 8] = [
    (0, 114, 178),
    (213, 94, 0),
    (0, 158, 115),
    (204, 121, 167),
    (230, 159, 0),
    (86, 180, 233),
    (68, 68, 68),
    (0, 0, 0),
];

const GREY: RGBColor = RGBColor(120, 120, 120);
const FONT: &str = "sans-serif";

/// Where the legend goes.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Legend {
    /// A column right of the plot, never covering data (the default).
    #[default]
    Outside,
    /// Inside the plot, upper right corner.
    UpperRight,
    /// Upper left.
    UpperLeft,
    /// Lower right.
    LowerRight,
    /// Lower left.
    LowerLeft,
    /// No legend.
    Hidden,
}

/// A chart: title, axis labels, series and reference lines.
#[derive(Clone, Debug)]
pub struct Chart {
    /// Caption above the plot.
    pub title: String,
    /// Label of the x axis.
    pub x_label: String,
    /// Label of the y axis.
    pub y_label: String,
    /// The data, drawn bands first, then lines, then points (so points stay visible).
    pub series: Vec<Series>,
    /// Dashed grey horizontal lines across the whole plot, with a label at the right end
    /// (e.g. zero, ±1 and ±2 standard deviations).
    pub reference_lines: Vec<ReferenceLine>,
    /// Logarithmic y axis; non-positive values are left out.
    pub log_y: bool,
    /// Fixed x range instead of the data range (with 4 % padding).
    pub x_range: Option<(f64, f64)>,
    /// The x axis counts items (variant 1, 2, …): ticks only at whole numbers.
    pub integer_x: bool,
    /// Fixed y range instead of the data range (with 6 % padding).
    pub y_range: Option<(f64, f64)>,
    /// Legend position.
    pub legend: Legend,
    /// Width and height in pixels.
    pub size: (u32, u32),
}

impl Default for Chart {
    fn default() -> Self {
        Chart {
            title: String::new(),
            x_label: String::new(),
            y_label: String::new(),
            series: Vec::new(),
            reference_lines: Vec::new(),
            log_y: false,
            x_range: None,
            integer_x: false,
            y_range: None,
            legend: Legend::Outside,
            size: (800, 500),
        }
    }
}

/// A horizontal reference line.
#[derive(Clone, Debug, PartialEq)]
pub struct ReferenceLine {
    /// Height in data units.
    pub y: f64,
    /// Text at the right end of the line (may be empty).
    pub label: String,
}

/// The marker of a points series.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Marker {
    /// Filled circle.
    Circle,
    /// Filled square.
    Square,
    /// Filled triangle, tip up.
    Triangle,
    /// Filled diamond.
    Diamond,
}

impl Marker {
    /// The shape that goes with palette index `i` when none is set.
    pub fn cycled(i: usize) -> Marker {
        [
            Marker::Circle,
            Marker::Square,
            Marker::Triangle,
            Marker::Diamond,
        ][i % 4]
    }
}

/// One data series.
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    /// Legend entry; an empty label leaves the series out of the legend.
    pub label: String,
    /// Index into [`PALETTE`] (taken modulo its length).
    pub colour: usize,
    /// Marker of a points series; `None` cycles with the colour index.
    pub marker: Option<Marker>,
    /// What to draw.
    pub kind: SeriesKind,
}

/// The shape of a series.
#[derive(Clone, Debug, PartialEq)]
pub enum SeriesKind {
    /// Points with symmetric y errors; `x_offset` (data units) shifts them sideways so
    /// series at the same x stay readable.
    Points {
        /// Abscissae.
        x: Vec<f64>,
        /// Ordinates.
        y: Vec<f64>,
        /// One-sigma errors (0 or NaN: no bar).
        y_err: Vec<f64>,
        /// Sideways shift in data units.
        x_offset: f64,
    },
    /// A filled band between `lo` and `hi`, semi-transparent.
    Band {
        /// Abscissae.
        x: Vec<f64>,
        /// Lower edge.
        lo: Vec<f64>,
        /// Upper edge.
        hi: Vec<f64>,
    },
    /// A line through the points.
    Line {
        /// Abscissae.
        x: Vec<f64>,
        /// Ordinates.
        y: Vec<f64>,
        /// Dashed instead of solid.
        dashed: bool,
    },
}

impl Series {
    /// Points with error bars.
    pub fn points(
        label: impl Into<String>,
        colour: usize,
        x: Vec<f64>,
        y: Vec<f64>,
        y_err: Vec<f64>,
    ) -> Self {
        Series {
            label: label.into(),
            colour,
            marker: None,
            kind: SeriesKind::Points {
                x,
                y,
                y_err,
                x_offset: 0.0,
            },
        }
    }

    /// A semi-transparent band.
    pub fn band(
        label: impl Into<String>,
        colour: usize,
        x: Vec<f64>,
        lo: Vec<f64>,
        hi: Vec<f64>,
    ) -> Self {
        Series {
            label: label.into(),
            colour,
            marker: None,
            kind: SeriesKind::Band { x, lo, hi },
        }
    }

    /// A solid line.
    pub fn line(label: impl Into<String>, colour: usize, x: Vec<f64>, y: Vec<f64>) -> Self {
        Series {
            label: label.into(),
            colour,
            marker: None,
            kind: SeriesKind::Line {
                x,
                y,
                dashed: false,
            },
        }
    }

    /// Shift points sideways by `dx` data units (no effect on bands and lines).
    pub fn offset(mut self, dx: f64) -> Self {
        if let SeriesKind::Points { x_offset, .. } = &mut self.kind {
            *x_offset = dx;
        }
        self
    }

    /// Use marker `m` (points only).
    pub fn marker(mut self, m: Marker) -> Self {
        self.marker = Some(m);
        self
    }

    /// The marker drawn for this series.
    pub fn shape(&self) -> Marker {
        self.marker.unwrap_or(Marker::cycled(self.colour))
    }

    /// Draw a line dashed (no effect on points and bands).
    pub fn dashed(mut self) -> Self {
        if let SeriesKind::Line { dashed, .. } = &mut self.kind {
            *dashed = true;
        }
        self
    }

    fn check(&self, chart: &str) -> Result<()> {
        let (n, others): (usize, Vec<(&str, usize)>) = match &self.kind {
            SeriesKind::Points { x, y, y_err, .. } => {
                (x.len(), vec![("y", y.len()), ("y_err", y_err.len())])
            }
            SeriesKind::Band { x, lo, hi } => (x.len(), vec![("lo", lo.len()), ("hi", hi.len())]),
            SeriesKind::Line { x, y, .. } => (x.len(), vec![("y", y.len())]),
        };
        for (name, len) in others {
            if len != n {
                return Err(Error::analysis(
                    "report",
                    format!(
                        "chart `{chart}`, series `{}`: {n} x values but {len} {name} values",
                        self.label
                    ),
                ));
            }
        }
        Ok(())
    }
}

pub(crate) fn colour_of(i: usize) -> RGBColor {
    let (r, g, b) = PALETTE[i % PALETTE.len()];
    RGBColor(r, g, b)
}

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

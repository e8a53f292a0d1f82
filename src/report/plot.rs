//! Publication-style SVG charts from a small, physics-free description: points with error
//! bars, semi-transparent bands, lines and labelled horizontal reference lines, on a linear
//! or logarithmic y axis, with a legend.
//!
//! Drawn with plotters' SVG backend, which writes `<text>` elements and so needs no font
//! files. Colours follow the colour-blind-safe hues of Okabe & Ito ("Color Universal
//! Design", 2008), with marker shapes cycling as well, so series stay distinguishable in
//! greyscale print.

use super::table::{significant, trim_zeros};
use crate::error::{Error, Result};
use plotters::coord::ranged1d::{AsRangedCoord, ValueFormatter};
use plotters::coord::Shift;
use plotters::prelude::*;
use std::ops::Range;
use std::path::Path;

/// The series palette: blue, vermillion, bluish green, reddish purple, orange, sky blue,
/// dark grey (Okabe & Ito 2008 hues; their yellow is left out as too faint on white).
pub const PALETTE: [(u8, u8, u8); 7] = [
    (0, 114, 178),
    (213, 94, 0),
    (0, 158, 115),
    (204, 121, 167),
    (230, 159, 0),
    (86, 180, 233),
    (68, 68, 68),
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

/// One data series.
#[derive(Clone, Debug, PartialEq)]
pub struct Series {
    /// Legend entry; an empty label leaves the series out of the legend.
    pub label: String,
    /// Index into [`PALETTE`] (taken modulo its length); also picks the marker shape.
    pub colour: usize,
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
            kind: SeriesKind::Band { x, lo, hi },
        }
    }

    /// A solid line.
    pub fn line(label: impl Into<String>, colour: usize, x: Vec<f64>, y: Vec<f64>) -> Self {
        Series {
            label: label.into(),
            colour,
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

fn colour_of(i: usize) -> RGBColor {
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
    Ok(buf)
}

/// Render `chart` and write the SVG to `path`.
pub fn write_svg(chart: &Chart, path: &Path) -> Result<()> {
    let svg = render_svg(chart)?;
    std::fs::write(path, svg).map_err(|e| Error::io(path, e))
}

type DrawResult<T = ()> = std::result::Result<T, DrawingAreaErrorKind<std::io::Error>>;
type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;

/// White background, the title across the top, and (for [`Legend::Outside`] with labelled
/// series) a legend column on the right: returns the plot area and the legend column.
fn layout<'a>(chart: &Chart, root: &Area<'a>) -> DrawResult<(Area<'a>, Option<Area<'a>>)> {
    root.fill(&WHITE)?;
    let body = if chart.title.is_empty() {
        root.clone()
    } else {
        root.titled(&chart.title, (FONT, 20))?
    };
    let labels: Vec<usize> = chart
        .series
        .iter()
        .filter(|s| !s.label.is_empty())
        .map(|s| s.label.chars().count())
        .collect();
    if chart.legend != Legend::Outside || labels.is_empty() {
        return Ok((body, None));
    }
    // About 7 px per character of a 14 px sans-serif font, plus the glyph column.
    let longest = labels.into_iter().max().unwrap_or(0) as i32;
    let width = (52 + 7 * longest).min(chart.size.0 as i32 / 2);
    let (plot, side) = body.split_horizontally(chart.size.0 as i32 - width);
    Ok((plot, Some(side)))
}

/// The legend as a column beside the plot, entries in series order.
fn draw_side_legend(chart: &Chart, side: &Area<'_>) -> DrawResult {
    let style =
        TextStyle::from((FONT, 14).into_font()).pos(plotters::style::text_anchor::Pos::new(
            plotters::style::text_anchor::HPos::Left,
            plotters::style::text_anchor::VPos::Center,
        ));
    // 24 px per entry, closer when many entries would run off the bottom.
    let entries = chart
        .series
        .iter()
        .filter(|s| !s.label.is_empty())
        .count()
        .max(1) as i32;
    let step = ((chart.size.1 as i32 - 60) / entries).clamp(12, 24);
    let mut y = 24;
    for s in chart.series.iter().filter(|s| !s.label.is_empty()) {
        let c = colour_of(s.colour);
        match &s.kind {
            SeriesKind::Band { .. } => {
                side.draw(&Rectangle::new(
                    [(8, y - 6), (32, y + 6)],
                    c.mix(0.35).filled(),
                ))?;
            }
            SeriesKind::Line { dashed: false, .. } => {
                side.draw(&PathElement::new(vec![(8, y), (32, y)], c.stroke_width(2)))?;
            }
            SeriesKind::Line { dashed: true, .. } => {
                for x in [8, 19] {
                    side.draw(&PathElement::new(
                        vec![(x, y), (x + 7, y)],
                        c.stroke_width(2),
                    ))?;
                }
            }
            SeriesKind::Points { .. } => {
                side.draw(&PathElement::new(
                    vec![(20, y - 8), (20, y + 8)],
                    c.stroke_width(1),
                ))?;
                match s.colour % 4 {
                    0 => side.draw(&circle(20, y, c))?,
                    1 => side.draw(&square(20, y, c))?,
                    2 => side.draw(&triangle(20, y, c))?,
                    _ => side.draw(&diamond(20, y, c))?,
                }
            }
        }
        side.draw(&Text::new(s.label.clone(), (40, y), style.clone()))?;
        y += step;
    }
    Ok(())
}

fn draw<Y>(
    chart: &Chart,
    root: &Area<'_>,
    xr: Range<f64>,
    yr: Y,
    y_ends: (f64, f64),
    y_tick: &dyn Fn(f64) -> String,
) -> DrawResult
where
    Y: AsRangedCoord<Value = f64>,
    Y::CoordDescType: ValueFormatter<f64>,
{
    let (x0, x1) = (xr.start, xr.end);
    let (y_lo, y_hi) = y_ends;
    let y_area = y_label_area(y_ends, chart.log_y, y_tick);
    let mut ctx = ChartBuilder::on(root)
        .margin(12)
        .margin_right(24)
        .x_label_area_size(48)
        .y_label_area_size(y_area)
        .build_cartesian_2d(xr, yr)?;
    ctx.configure_mesh()
        .x_desc(&chart.x_label)
        .y_desc(&chart.y_label)
        .x_labels(10)
        .y_labels(8)
        .x_label_formatter(&|v| tick(*v))
        .y_label_formatter(&|v| y_tick(*v))
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .bold_line_style(RGBColor(225, 225, 225))
        .light_line_style(TRANSPARENT)
        .axis_style(RGBColor(60, 60, 60))
        .draw()?;

    // Nothing is drawn outside the axes: points outside are left out, error bars and bands
    // cut at the edges, lines broken where they leave the range.
    let in_x = |x: f64| x.is_finite() && x >= x0 && x <= x1;
    let keep = |y: f64| y.is_finite() && y >= y_lo && y <= y_hi;
    let clamp = |y: f64| y.clamp(y_lo, y_hi);

    for line in &chart.reference_lines {
        if !keep(line.y) {
            continue;
        }
        ctx.draw_series(DashedLineSeries::new(
            vec![(x0, line.y), (x1, line.y)],
            6,
            5,
            GREY.stroke_width(1),
        ))?;
        if !line.label.is_empty() {
            let style = TextStyle::from((FONT, 13).into_font()).color(&GREY).pos(
                plotters::style::text_anchor::Pos::new(
                    plotters::style::text_anchor::HPos::Right,
                    plotters::style::text_anchor::VPos::Bottom,
                ),
            );
            ctx.draw_series(std::iter::once(
                EmptyElement::at((x1, line.y)) + Text::new(line.label.clone(), (-4, -2), style),
            ))?;
        }
    }

    // Bands first, then lines, then points.
    for s in &chart.series {
        let SeriesKind::Band { x, lo, hi } = &s.kind else {
            continue;
        };
        let c = colour_of(s.colour);
        let pts: Vec<(f64, f64, f64)> = x
            .iter()
            .zip(lo.iter().zip(hi))
            .filter(|(x, (l, h))| in_x(**x) && !l.is_nan() && !h.is_nan())
            .map(|(&x, (&l, &h))| (x, clamp(l), clamp(h)))
            .collect();
        if pts.len() < 2 {
            continue;
        }
        let mut outline: Vec<(f64, f64)> = pts.iter().map(|&(x, _, h)| (x, h)).collect();
        outline.extend(pts.iter().rev().map(|&(x, l, _)| (x, l)));
        let anno = ctx.draw_series(std::iter::once(Polygon::new(outline, c.mix(0.22).filled())))?;
        if !s.label.is_empty() {
            anno.label(&s.label).legend(move |(x, y)| {
                Rectangle::new([(x, y - 6), (x + 20, y + 6)], c.mix(0.35).filled())
            });
        }
        for edge in [
            pts.iter().map(|&(x, _, h)| (x, h)).collect::<Vec<_>>(),
            pts.iter().map(|&(x, l, _)| (x, l)).collect(),
        ] {
            ctx.draw_series(LineSeries::new(edge, c.mix(0.55).stroke_width(1)))?;
        }
    }
    for s in &chart.series {
        let SeriesKind::Line { x, y, dashed } = &s.kind else {
            continue;
        };
        let c = colour_of(s.colour);
        let style = c.stroke_width(2);
        let mut pieces: Vec<Vec<(f64, f64)>> = Vec::new();
        let mut current: Vec<(f64, f64)> = Vec::new();
        for (&x, &y) in x.iter().zip(y) {
            if in_x(x) && keep(y) {
                current.push((x, y));
            } else if !current.is_empty() {
                pieces.push(std::mem::take(&mut current));
            }
        }
        pieces.push(current);
        let mut anno = None;
        for piece in pieces {
            anno = Some(if *dashed {
                ctx.draw_series(DashedLineSeries::new(piece, 8, 5, style))?
            } else {
                ctx.draw_series(LineSeries::new(piece, style))?
            });
        }
        let Some(anno) = anno else { continue };
        if !s.label.is_empty() {
            let dashed = *dashed;
            anno.label(&s.label).legend(move |(x, y)| {
                let seg = if dashed {
                    vec![(x, y), (x + 8, y)]
                } else {
                    vec![(x, y), (x + 20, y)]
                };
                PathElement::new(seg, style)
            });
        }
    }
    for s in &chart.series {
        let SeriesKind::Points {
            x,
            y,
            y_err,
            x_offset,
        } = &s.kind
        else {
            continue;
        };
        let c = colour_of(s.colour);
        let shape = s.colour % 4;
        let pts: Vec<(f64, f64, f64)> = x
            .iter()
            .zip(y.iter().zip(y_err))
            .map(|(&x, (&y, &e))| (x + x_offset, y, e))
            .filter(|&(x, y, _)| in_x(x) && keep(y))
            .collect();
        let bar = c.stroke_width(1);
        for &(x, y, e) in &pts {
            if !(e.is_finite() && e > 0.0) {
                continue;
            }
            let (lo, hi) = (clamp(y - e), clamp(y + e));
            ctx.draw_series(std::iter::once(PathElement::new(
                vec![(x, lo), (x, hi)],
                bar,
            )))?;
            // Caps only where the bar really ends (not where the axis cuts it).
            let caps: Vec<_> = [(lo, y - e), (hi, y + e)]
                .into_iter()
                .filter(|&(end, raw)| end == raw)
                .map(|(end, _)| {
                    EmptyElement::at((x, end)) + PathElement::new(vec![(-4, 0), (4, 0)], bar)
                })
                .collect();
            ctx.draw_series(caps)?;
        }
        let label = &s.label;
        macro_rules! markers {
            ($shape:ident) => {{
                let anno = ctx.draw_series(
                    pts.iter()
                        .map(|&(x, y, _)| EmptyElement::at((x, y)) + $shape(0, 0, c)),
                )?;
                if !label.is_empty() {
                    anno.label(label).legend(move |(x, y)| $shape(x + 10, y, c));
                }
            }};
        }
        match shape {
            0 => markers!(circle),
            1 => markers!(square),
            2 => markers!(triangle),
            _ => markers!(diamond),
        }
    }

    let position = match chart.legend {
        Legend::UpperRight => SeriesLabelPosition::UpperRight,
        Legend::UpperLeft => SeriesLabelPosition::UpperLeft,
        Legend::LowerRight => SeriesLabelPosition::LowerRight,
        Legend::LowerLeft => SeriesLabelPosition::LowerLeft,
        Legend::Outside | Legend::Hidden => return Ok(()),
    };
    if chart.series.iter().any(|s| !s.label.is_empty()) {
        ctx.configure_series_labels()
            .position(position)
            .margin(10)
            .legend_area_size(26)
            .label_font((FONT, 14))
            .background_style(WHITE.mix(0.85))
            .border_style(RGBColor(180, 180, 180))
            .draw()?;
    }
    Ok(())
}

/// Filled markers centred on pixel `(x, y)`: circle, square, triangle, diamond.
fn circle(x: i32, y: i32, c: RGBColor) -> Circle<(i32, i32), i32> {
    Circle::new((x, y), 4, c.filled())
}

fn square(x: i32, y: i32, c: RGBColor) -> Rectangle<(i32, i32)> {
    Rectangle::new([(x - 4, y - 4), (x + 4, y + 4)], c.filled())
}

fn triangle(x: i32, y: i32, c: RGBColor) -> Polygon<(i32, i32)> {
    Polygon::new(vec![(x, y - 5), (x + 5, y + 4), (x - 5, y + 4)], c.filled())
}

fn diamond(x: i32, y: i32, c: RGBColor) -> Polygon<(i32, i32)> {
    Polygon::new(
        vec![(x, y - 5), (x + 5, y), (x, y + 5), (x - 5, y)],
        c.filled(),
    )
}

impl Chart {
    /// Values at or below this are not drawn (non-positive values on a log axis).
    fn y_floor(&self) -> f64 {
        if self.log_y {
            0.0
        } else {
            f64::NEG_INFINITY
        }
    }
}

/// The x and y ranges: fixed by the chart, or the data extent (error bars and bands
/// included) with padding; never empty.
fn ranges(chart: &Chart) -> (Range<f64>, Range<f64>) {
    // Values near the end of the float range would overflow the padding and the tick
    // arithmetic: they stay out of the range (and so out of the plot).
    const HUGE: f64 = 1e250;
    let floor = chart.y_floor();
    let ok_y = |y: f64| y.is_finite() && y > floor && y.abs() < HUGE;
    let ok_x = |x: f64| x.is_finite() && x.abs() < HUGE;
    let mut xs: Vec<f64> = Vec::new();
    let mut ys: Vec<f64> = Vec::new();
    for s in &chart.series {
        match &s.kind {
            SeriesKind::Points {
                x,
                y,
                y_err,
                x_offset,
            } => {
                for ((&x, &y), &e) in x.iter().zip(y).zip(y_err) {
                    if !(ok_x(x + x_offset) && ok_y(y)) {
                        continue;
                    }
                    xs.push(x + x_offset);
                    ys.push(y);
                    if e.is_finite() && e > 0.0 {
                        if ok_y(y + e) {
                            ys.push(y + e);
                        }
                        if ok_y(y - e) {
                            ys.push(y - e);
                        }
                    }
                }
            }
            SeriesKind::Band { x, lo, hi } => {
                for ((&x, &l), &h) in x.iter().zip(lo).zip(hi) {
                    if ok_x(x) {
                        xs.push(x);
                        ys.extend([l, h].into_iter().filter(|&v| ok_y(v)));
                    }
                }
            }
            SeriesKind::Line { x, y, .. } => {
                for (&x, &y) in x.iter().zip(y) {
                    if ok_x(x) && ok_y(y) {
                        xs.push(x);
                        ys.push(y);
                    }
                }
            }
        }
    }
    let xr = match chart.x_range {
        Some((a, b)) if ok_x(a) && ok_x(b) && wide_enough(a, b) => a..b,
        _ => padded(&xs, 0.04, false),
    };
    let yr = match chart.y_range {
        Some((a, b)) if ok_y(a) && ok_y(b) && wide_enough(a, b) => a..b,
        _ => padded(&ys, 0.06, chart.log_y),
    };
    (xr, yr)
}

/// True when `a < b` with room for tick marks: a width neither zero, subnormal, nor lost
/// in the rounding of the ends.
fn wide_enough(a: f64, b: f64) -> bool {
    let width = b - a;
    width > 1e-200 && width > 1e-12 * a.abs().max(b.abs())
}

/// The extent of `v` widened by `frac` of its width on each side (in log10 for `log`).
fn padded(v: &[f64], frac: f64, log: bool) -> Range<f64> {
    let t = |x: f64| if log { x.log10() } else { x };
    let inv = |x: f64| if log { 10f64.powf(x) } else { x };
    let (mut lo, mut hi) = v
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(t(x)), b.max(t(x)))
        });
    if !(lo.is_finite() && hi.is_finite()) {
        (lo, hi) = (0.0, 1.0);
    }
    // Keep every value a plotting library can handle: drop the far end of the float range,
    // and widen a range too narrow to hold ticks (zero or subnormal width).
    let width = hi - lo;
    let pad = if wide_enough(lo, hi) {
        width * frac
    } else {
        (lo, hi) = (0.5 * (lo + hi), 0.5 * (lo + hi));
        0.5 * lo.abs().max(if log { 0.5 } else { 1.0 })
    };
    let (a, b) = (inv(lo - pad), inv(hi + pad));
    if a.is_finite() && b.is_finite() && a < b {
        a..b
    } else if inv(lo).is_finite() && inv(hi).is_finite() && inv(lo) < inv(hi) {
        // Padding overflowed near the end of the float range: draw unpadded.
        inv(lo)..inv(hi)
    } else {
        0.0..1.0
    }
}

/// Width in pixels for the y tick labels and the rotated axis description: the longest
/// likely tick label (ends and middle of the range rounded to a 1-2-5 step of about a
/// tenth of it; powers of ten on a log axis) at the naive text metric of the SVG backend
/// (0.7 em per character at 14 px), plus room for the description.
fn y_label_area((lo, hi): (f64, f64), log: bool, y_tick: &dyn Fn(f64) -> String) -> u32 {
    let samples: Vec<f64> = if log {
        vec![
            10f64.powf(lo.log10().floor()),
            10f64.powf(hi.log10().ceil()),
        ]
    } else {
        let raw = (hi - lo) / 10.0;
        let mag = 10f64.powf(raw.log10().floor());
        let step = [1.0, 2.0, 5.0, 10.0]
            .into_iter()
            .map(|m| m * mag)
            .find(|&s| s >= raw)
            .unwrap_or(10.0 * mag);
        [lo, hi, 0.5 * (lo + hi), lo + step]
            .into_iter()
            .map(|v| (v / step).round() * step)
            .collect()
    };
    let chars = samples
        .iter()
        .map(|&v| y_tick(v).chars().count())
        .max()
        .unwrap_or(4);
    (40 + 8 * chars as u32).clamp(64, 160)
}

/// A tick label on a logarithmic axis: `10⁻³`, `2×10⁻⁵` (Unicode superscripts).
fn power_tick(v: f64) -> String {
    if !(v.is_finite() && v > 0.0) {
        return tick(v);
    }
    let mut exp = v.log10().floor() as i32;
    let mut mant = v / 10f64.powi(exp);
    if mant >= 9.9995 {
        mant /= 10.0;
        exp += 1;
    }
    let sup: String = exp
        .to_string()
        .chars()
        .map(|c| match c {
            '-' => '⁻',
            '0' => '⁰',
            '1' => '¹',
            '2' => '²',
            '3' => '³',
            '4' => '⁴',
            '5' => '⁵',
            '6' => '⁶',
            '7' => '⁷',
            '8' => '⁸',
            _ => '⁹',
        })
        .collect();
    if (mant - 1.0).abs() < 5e-4 {
        format!("10{sup}")
    } else {
        let m = format!("{mant:.3}");
        let m = m.trim_end_matches('0').trim_end_matches('.');
        format!("{m}×10{sup}")
    }
}

/// A tick label: up to 6 significant digits without trailing zeros, very small or large
/// values in `1e-5` style, negative numbers with a typographic minus sign.
fn tick(v: f64) -> String {
    let s = plain_tick(v);
    match s.strip_prefix('-') {
        Some(rest) => format!("−{rest}"),
        None => s,
    }
}

fn plain_tick(v: f64) -> String {
    if v == 0.0 {
        return "0".into();
    }
    if v.is_finite() && !(1e-3..1e5).contains(&v.abs()) {
        return trim_zeros(&format!("{v:.3e}"));
    }
    trim_zeros(&significant(v, 6))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tick_labels() {
        assert_eq!(tick(0.30000000000000004), "0.3");
        assert_eq!(tick(-0.125), "−0.125");
        assert_eq!(tick(-3.0), "−3");
        assert_eq!(tick(12.0), "12");
        assert_eq!(tick(0.0), "0");
        assert_eq!(tick(1e-5), "1e-5");
        assert_eq!(tick(2.5e-7), "2.5e-7");
        assert_eq!(tick(-2.5e-7), "−2.5e-7");
        assert_eq!(tick(1e6), "1e6");
    }

    #[test]
    fn power_tick_labels() {
        assert_eq!(power_tick(1e-3), "10⁻³");
        assert_eq!(power_tick(1.0), "10⁰");
        assert_eq!(power_tick(2e-5), "2×10⁻⁵");
        assert_eq!(power_tick(1e12), "10¹²");
        assert_eq!(power_tick(0.09999999999), "10⁻¹");
    }

    #[test]
    fn padding_handles_degenerate_data() {
        let r = padded(&[], 0.05, false);
        assert!(r.start < r.end);
        let r = padded(&[2.0, 2.0], 0.05, false);
        assert!(r.start < 2.0 && r.end > 2.0);
        let r = padded(&[1e-6, 1e-2], 0.05, true);
        assert!(r.start < 1e-6 && r.start > 0.0 && r.end > 1e-2);
    }

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

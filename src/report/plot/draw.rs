//! The plotters calls behind the renderer (`render_svg`, in this module's parent): the page
//! layout (title, legend column), the axes, then reference lines, bands, lines and points in
//! that order, so points stay visible. Nothing is drawn outside the axes: points outside are
//! marked by an arrow at the edge, error bars and bands are cut, lines are broken where they
//! leave the range.

use super::axes::{tick, y_label_area};
use super::chart::{colour_of, Chart, Legend, Marker, Series, SeriesKind, FONT, GREY};
use super::markup;
use plotters::coord::ranged1d::{AsRangedCoord, ValueFormatter};
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};
use std::ops::Range;

pub(super) type DrawResult<T = ()> = std::result::Result<T, DrawingAreaErrorKind<std::io::Error>>;
type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;
type Ctx<'a, 'b, CT> = ChartContext<'a, SVGBackend<'b>, CT>;

/// The note under a plot whose error bars were cut at the axis.
pub const CLIPPED_NOTE: &str = "▲▼ error bar cut at the axis";

/// White background, the title across the top, and (for [`Legend::Outside`] with labelled
/// series) a legend column on the right: returns the plot area and the legend column.
pub(super) fn layout<'a>(
    chart: &Chart,
    root: &Area<'a>,
) -> DrawResult<(Area<'a>, Option<Area<'a>>)> {
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
        .map(|s| markup::plain(&s.label).chars().count())
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
pub(super) fn draw_side_legend(chart: &Chart, side: &Area<'_>) -> DrawResult {
    let style = TextStyle::from((FONT, 14).into_font()).pos(Pos::new(HPos::Left, VPos::Center));
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
                match s.shape() {
                    Marker::Circle => side.draw(&circle(20, y, c))?,
                    Marker::Square => side.draw(&square(20, y, c))?,
                    Marker::Triangle => side.draw(&triangle(20, y, c))?,
                    Marker::Diamond => side.draw(&diamond(20, y, c))?,
                }
            }
        }
        side.draw(&Text::new(s.label.clone(), (40, y), style.clone()))?;
        y += step;
    }
    Ok(())
}

/// The visible window in data units.
#[derive(Clone, Copy)]
struct View {
    x0: f64,
    x1: f64,
    y_lo: f64,
    y_hi: f64,
}

impl View {
    fn in_x(&self, x: f64) -> bool {
        x.is_finite() && x >= self.x0 && x <= self.x1
    }
    fn keep(&self, y: f64) -> bool {
        y.is_finite() && y >= self.y_lo && y <= self.y_hi
    }
    fn clamp(&self, y: f64) -> f64 {
        y.clamp(self.y_lo, self.y_hi)
    }
}

/// Axes and every series of `chart` on `root`.
pub(super) fn draw<Y>(
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
    let view = View {
        x0: xr.start,
        x1: xr.end,
        y_lo: y_ends.0,
        y_hi: y_ends.1,
    };
    let y_area = y_label_area(y_ends, chart.log_y, y_tick);
    // A counting axis: at most one label per whole number (plotters then steps by 1, 2, 5, …),
    // and no label at a fraction.
    let x_labels = if chart.integer_x {
        ((xr.end - xr.start).floor() as usize + 1).clamp(2, 10)
    } else {
        10
    };
    let integer_x = chart.integer_x;
    let x_tick = move |v: &f64| {
        if integer_x && (v - v.round()).abs() > 1e-9 {
            String::new()
        } else {
            tick(*v)
        }
    };
    let mut ctx = ChartBuilder::on(root)
        .margin(12)
        .margin_right(24)
        .x_label_area_size(48)
        .y_label_area_size(y_area)
        .build_cartesian_2d(xr, yr)?;
    ctx.configure_mesh()
        .x_desc(&chart.x_label)
        .y_desc(&chart.y_label)
        .x_labels(x_labels)
        .y_labels(8)
        .x_label_formatter(&x_tick)
        .y_label_formatter(&|v| y_tick(*v))
        .label_style((FONT, 14))
        .axis_desc_style((FONT, 16))
        .bold_line_style(RGBColor(225, 225, 225))
        .light_line_style(TRANSPARENT)
        .axis_style(RGBColor(60, 60, 60))
        .draw()?;

    reference_lines(&mut ctx, chart, view)?;
    for s in &chart.series {
        band(&mut ctx, s, view)?;
    }
    for s in &chart.series {
        line(&mut ctx, s, view)?;
    }
    let mut clipped = false;
    for s in &chart.series {
        clipped |= points(&mut ctx, s, view)?;
    }
    if clipped {
        let style = TextStyle::from((FONT, 12).into_font())
            .color(&GREY)
            .pos(Pos::new(HPos::Left, VPos::Bottom));
        ctx.draw_series(std::iter::once(
            EmptyElement::at((view.x0, view.y_lo)) + Text::new(CLIPPED_NOTE, (0, 46), style),
        ))?;
    }
    inside_legend(&mut ctx, chart)
}

/// Dashed grey horizontal lines with their labels at the right end.
fn reference_lines<CT>(ctx: &mut Ctx<'_, '_, CT>, chart: &Chart, view: View) -> DrawResult
where
    CT: CoordTranslate<From = (f64, f64)>,
{
    for line in &chart.reference_lines {
        if !view.keep(line.y) {
            continue;
        }
        ctx.draw_series(DashedLineSeries::new(
            vec![(view.x0, line.y), (view.x1, line.y)],
            6,
            5,
            GREY.stroke_width(1),
        ))?;
        if !line.label.is_empty() {
            let style = TextStyle::from((FONT, 13).into_font())
                .color(&GREY)
                .pos(Pos::new(HPos::Right, VPos::Bottom));
            ctx.draw_series(std::iter::once(
                EmptyElement::at((view.x1, line.y))
                    + Text::new(line.label.clone(), (-4, -2), style),
            ))?;
        }
    }
    Ok(())
}

/// A semi-transparent band with thin edges, cut at the axes.
fn band<CT>(ctx: &mut Ctx<'_, '_, CT>, s: &Series, view: View) -> DrawResult
where
    CT: CoordTranslate<From = (f64, f64)>,
{
    let SeriesKind::Band { x, lo, hi } = &s.kind else {
        return Ok(());
    };
    let c = colour_of(s.colour);
    let pts: Vec<(f64, f64, f64)> = x
        .iter()
        .zip(lo.iter().zip(hi))
        .filter(|(x, (l, h))| view.in_x(**x) && !l.is_nan() && !h.is_nan())
        .map(|(&x, (&l, &h))| (x, view.clamp(l), view.clamp(h)))
        .collect();
    if pts.len() < 2 {
        return Ok(());
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
    Ok(())
}

/// A solid or dashed line, broken where it leaves the range.
fn line<CT>(ctx: &mut Ctx<'_, '_, CT>, s: &Series, view: View) -> DrawResult
where
    CT: CoordTranslate<From = (f64, f64)>,
{
    let SeriesKind::Line { x, y, dashed } = &s.kind else {
        return Ok(());
    };
    let style = colour_of(s.colour).stroke_width(2);
    let mut pieces: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut current: Vec<(f64, f64)> = Vec::new();
    for (&x, &y) in x.iter().zip(y) {
        if view.in_x(x) && view.keep(y) {
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
    if let (Some(anno), false) = (anno, s.label.is_empty()) {
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
    Ok(())
}

/// Markers with error bars; a bar cut by the axis ends in an arrow instead of a cap, and a
/// point outside the range is an arrow at the edge. Returns whether anything was cut.
fn points<CT>(ctx: &mut Ctx<'_, '_, CT>, s: &Series, view: View) -> DrawResult<bool>
where
    CT: CoordTranslate<From = (f64, f64)>,
{
    let SeriesKind::Points {
        x,
        y,
        y_err,
        x_offset,
    } = &s.kind
    else {
        return Ok(false);
    };
    let c = colour_of(s.colour);
    let bar = c.stroke_width(1);
    let mut clipped = false;
    let mut inside = Vec::new();
    for ((&x, &y), &e) in x.iter().zip(y).zip(y_err) {
        let x = x + x_offset;
        if !(view.in_x(x) && y.is_finite()) {
            continue;
        }
        if !view.keep(y) {
            // the point itself is off the axis: an arrow at the edge it lies beyond
            let up = y > view.y_hi;
            ctx.draw_series(std::iter::once(
                EmptyElement::at((x, view.clamp(y))) + arrow_head(up, c),
            ))?;
            clipped = true;
            continue;
        }
        inside.push((x, y));
        if !(e.is_finite() && e > 0.0) {
            continue;
        }
        let (lo, hi) = (view.clamp(y - e), view.clamp(y + e));
        ctx.draw_series(std::iter::once(PathElement::new(
            vec![(x, lo), (x, hi)],
            bar,
        )))?;
        for (end, raw, up) in [(lo, y - e, false), (hi, y + e, true)] {
            if end == raw {
                ctx.draw_series(std::iter::once(
                    EmptyElement::at((x, end)) + PathElement::new(vec![(-4, 0), (4, 0)], bar),
                ))?;
            } else {
                ctx.draw_series(std::iter::once(
                    EmptyElement::at((x, end)) + arrow_head(up, c),
                ))?;
                clipped = true;
            }
        }
    }
    let label = &s.label;
    macro_rules! markers {
        ($shape:ident) => {{
            let anno = ctx.draw_series(
                inside
                    .iter()
                    .map(|&(x, y)| EmptyElement::at((x, y)) + $shape(0, 0, c)),
            )?;
            if !label.is_empty() {
                anno.label(label).legend(move |(x, y)| $shape(x + 10, y, c));
            }
        }};
    }
    match s.shape() {
        Marker::Circle => markers!(circle),
        Marker::Square => markers!(square),
        Marker::Triangle => markers!(triangle),
        Marker::Diamond => markers!(diamond),
    }
    Ok(clipped)
}

/// The legend inside the plot, where the chart asks for it there.
fn inside_legend<'a, CT>(ctx: &mut Ctx<'a, 'a, CT>, chart: &Chart) -> DrawResult
where
    CT: CoordTranslate<From = (f64, f64)>,
{
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

/// A small filled arrowhead with its base on the anchor, pointing up or down.
fn arrow_head(up: bool, c: RGBColor) -> Polygon<(i32, i32)> {
    let tip = if up { -7 } else { 7 };
    Polygon::new(vec![(-4, 0), (4, 0), (0, tip)], c.filled())
}

//! The chart description the renderer draws: a [`Chart`] of [`Series`] (points, bands,
//! lines) with reference lines, the legend position, the palette and the marker shapes.
//! Physics-free and free of plotters' drawing calls; the other plot files read it.

use crate::error::{Error, Result};
use plotters::style::RGBColor;

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

pub(super) const GREY: RGBColor = RGBColor(120, 120, 120);
pub(super) const FONT: &str = "sans-serif";

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

    pub(super) fn check(&self, chart: &str) -> Result<()> {
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

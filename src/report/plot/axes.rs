//! Axis ranges and tick labels: the data extent with padding (cutting error bars that would
//! flatten the plot), the width of the y label column, and tick texts with a typographic
//! minus sign and Unicode powers of ten.

use super::chart::{Chart, SeriesKind};
use crate::report::table::{significant, trim_zeros};
use std::ops::Range;

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
///
/// On a linear y axis without a fixed range, an error bar more than three times the median
/// bar of the chart that would also reach beyond the rest of the data by more than its
/// width is left out of the range (the bar is then cut at the axis and marked by `draw`),
/// so that one poorly determined point does not flatten all the others.
pub(super) fn ranges(chart: &Chart) -> (Range<f64>, Range<f64>) {
    // Values near the end of the float range would overflow the padding and the tick
    // arithmetic: they stay out of the range (and so out of the plot).
    const HUGE: f64 = 1e250;
    let floor = chart.y_floor();
    let ok_y = |y: f64| y.is_finite() && y > floor && y.abs() < HUGE;
    let ok_x = |x: f64| x.is_finite() && x.abs() < HUGE;
    let mut xs: Vec<f64> = Vec::new();
    let mut ys: Vec<f64> = Vec::new();
    // (centre, error) of every drawable point
    let mut bars: Vec<(f64, f64)> = Vec::new();
    for s in &chart.series {
        match &s.kind {
            SeriesKind::Points {
                x,
                y,
                y_err,
                x_offset,
            } => {
                for ((&x, &y), &e) in x.iter().zip(y).zip(y_err) {
                    if ok_x(x + x_offset) && ok_y(y) {
                        xs.push(x + x_offset);
                        bars.push((y, if e.is_finite() && e > 0.0 { e } else { 0.0 }));
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
    let limit = if chart.log_y || chart.y_range.is_some() {
        f64::INFINITY
    } else {
        outlier_limit(&bars)
    };
    let whole_bar = |ys: &mut Vec<f64>, (y, e): (f64, f64)| {
        ys.push(y);
        ys.extend([y - e, y + e].into_iter().filter(|&v| e > 0.0 && ok_y(v)));
    };
    let (core, wild): (Vec<_>, Vec<_>) = bars.into_iter().partition(|&(_, e)| e <= limit);
    for b in core {
        whole_bar(&mut ys, b);
    }
    let (lo, hi) = extent(&ys);
    for (y, e) in wild {
        if !(lo.is_finite() && hi.is_finite()) {
            whole_bar(&mut ys, (y, e));
            continue;
        }
        let w = (hi - lo).max(limit);
        if y - e >= lo - w && y + e <= hi + w {
            whole_bar(&mut ys, (y, e));
        } else if y >= lo - w && y <= hi + w {
            ys.push(y);
        }
    }
    let xr = match chart.x_range {
        Some((a, b)) if ok_x(a) && ok_x(b) && wide_enough(a, b) => a..b,
        _ => padded(&xs, 0.04, false),
    };
    let yr = match chart.y_range {
        Some((a, b)) if ok_y(a) && ok_y(b) && wide_enough(a, b) => a..b,
        _ => padded(&ys, 0.08, chart.log_y),
    };
    (xr, yr)
}

/// Three times the (lower) median of the positive error bars; infinite with fewer than two.
fn outlier_limit(bars: &[(f64, f64)]) -> f64 {
    let mut e: Vec<f64> = bars.iter().map(|b| b.1).filter(|e| *e > 0.0).collect();
    if e.len() < 2 {
        return f64::INFINITY;
    }
    e.sort_by(f64::total_cmp);
    3.0 * e[(e.len() - 1) / 2]
}

fn extent(v: &[f64]) -> (f64, f64) {
    v.iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
            (a.min(x), b.max(x))
        })
}

/// True when `a < b` with room for tick marks: a width neither zero, subnormal, nor lost
/// in the rounding of the ends.
pub(super) fn wide_enough(a: f64, b: f64) -> bool {
    let width = b - a;
    width > 1e-200 && width > 1e-12 * a.abs().max(b.abs())
}

/// The extent of `v` widened by `frac` of its width on each side (in log10 for `log`).
pub(super) fn padded(v: &[f64], frac: f64, log: bool) -> Range<f64> {
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
pub(super) fn y_label_area((lo, hi): (f64, f64), log: bool, y_tick: &dyn Fn(f64) -> String) -> u32 {
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
pub(super) fn power_tick(v: f64) -> String {
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
pub(super) fn tick(v: f64) -> String {
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
    fn one_huge_error_bar_does_not_set_the_range() {
        use crate::report::Series;
        let chart = Chart {
            series: vec![Series::points(
                "",
                0,
                vec![1.0, 2.0, 3.0, 4.0],
                vec![1.0, 0.8, 0.6, 0.5],
                vec![0.02, 0.03, 0.03, 40.0],
            )],
            ..Chart::default()
        };
        let (_, y) = ranges(&chart);
        assert!(y.start > -1.0 && y.end < 2.0, "{y:?}");
        assert!(y.start < 0.5 && y.end > 1.02, "{y:?}");
        // comparable bars are never cut
        let chart = Chart {
            series: vec![Series::points(
                "",
                0,
                vec![1.0, 2.0, 3.0],
                vec![1.0, 0.8, 0.6],
                vec![0.02, 0.03, 0.05],
            )],
            ..Chart::default()
        };
        let (_, y) = ranges(&chart);
        assert!(y.start < 0.55 && y.end > 1.02, "{y:?}");
    }
}

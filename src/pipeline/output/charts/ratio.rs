//! Ratio-stage plots for a few showcase channels: the ratio versus `τ − t_sep/2` per
//! separation with the plateau bands, the two-state fit curve per separation and the final
//! estimate; and the summed ratio versus `t_sep` with the summation line and its error band.
//! Each file is named by its channel (`ratio-V4-unpol-pf0.0.0-q0.0.1.svg`).

use super::figure::Figure;
use super::style::{channel_stem, estimator_style, tsep_colour, DATA_COLOUR};
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::ratio::{ChannelKey, ChannelResult, Estimator, PointSummary, ReIm};
use crate::report::plot::Marker;
use crate::report::{value_error, Chart, Series};
use crate::resample::Resampled;
use std::collections::BTreeSet;

/// The part (re or im) that carries the signal of an estimate.
fn signal_part(v: &ReIm) -> bool {
    v.re.central.abs() / v.re.error().max(1e-300) >= v.im.central.abs() / v.im.error().max(1e-300)
}

fn pick(v: &ReIm, re: bool) -> &Resampled {
    if re {
        &v.re
    } else {
        &v.im
    }
}

fn band(label: String, colour: usize, x: Vec<f64>, v: &Resampled) -> Series {
    Series::band(
        label,
        colour,
        x,
        vec![v.central - v.error(); 2],
        vec![v.central + v.error(); 2],
    )
}

/// Up to four channels, one per current, with the most precise final estimates.
pub(super) fn showcase_channels(results: &RunResults) -> Vec<(&ChannelKey, &ChannelResult)> {
    let Some(channels) = &results.channels else {
        return Vec::new();
    };
    let mut all: Vec<_> = channels
        .iter()
        .map(|(k, c)| {
            let part = pick(&c.final_estimate, signal_part(&c.final_estimate));
            let snr = part.central.abs() / part.error().max(1e-300);
            (k, c, snr)
        })
        .filter(|(_, _, s)| s.is_finite())
        .collect();
    all.sort_by(|a, b| b.2.total_cmp(&a.2));
    let mut seen = BTreeSet::new();
    all.into_iter()
        .filter(|(k, _, _)| seen.insert(k.current))
        .take(4)
        .map(|(k, c, _)| (k, c))
        .collect()
}

/// `ratio-<channel>`: one chart per showcase channel.
pub(super) fn ratio_charts(shown: &[(&ChannelKey, &ChannelResult)], tau_cut: u32) -> Vec<Figure> {
    shown
        .iter()
        .map(|(k, c)| {
            Figure::new(
                Plot::Ratio,
                format!("ratio-{}", channel_stem(k)),
                ratio_chart(k, c, tau_cut),
            )
        })
        .collect()
}

fn ratio_chart(k: &ChannelKey, c: &ChannelResult, tau_cut: u32) -> Chart {
    let re = signal_part(&c.final_estimate);
    let part = if re { "Re" } else { "Im" };
    let mut chart = Chart {
        title: format!("Ratio {part} R(t_{{sep}}, τ): {k}"),
        x_label: "τ − t_{sep}/2".into(),
        y_label: format!("{part} R"),
        ..Chart::default()
    };
    let mut curve_labelled = false;
    for (i, tsep) in c.ratio.tseps().into_iter().enumerate() {
        let colour = tsep_colour(tsep);
        let mid = tsep as f64 / 2.0;
        // the plateau fit of this tsep as a band over its fit range, in the points' colour
        if let Some(pl) = c.plateaus.iter().find(|p| p.tsep == tsep) {
            let x = vec![pl.tau_range.0 as f64 - mid, pl.tau_range.1 as f64 - mid];
            chart
                .series
                .push(band(String::new(), colour, x, pick(&pl.fit.value, re)));
        }
        let pts: Vec<_> = c.ratio.points.iter().filter(|p| p.tsep == tsep).collect();
        let part = |p: &PointSummary| if re { p.re } else { p.im };
        chart.series.push(
            Series::points(
                format!("t_{{sep}} = {tsep}"),
                colour,
                pts.iter().map(|p| p.tau as f64 - mid).collect(),
                pts.iter().map(|p| part(p).central).collect(),
                pts.iter().map(|p| part(p).error).collect(),
            )
            .marker(Marker::Diamond)
            .offset(0.05 * i as f64),
        );
        // the two-state fit at this tsep, over the insertion times it was fitted to
        if let Some(ts) = c.two_state.as_ref().filter(|t| t.tseps.contains(&tsep)) {
            let (a, b) = (tau_cut as f64, tsep as f64 - tau_cut as f64);
            if a < b {
                let taus: Vec<f64> = (0..=40).map(|j| a + (b - a) * j as f64 / 40.0).collect();
                let label = if curve_labelled {
                    String::new()
                } else {
                    curve_labelled = true;
                    format!("{} fit, per t_{{sep}}", Estimator::TwoState)
                };
                chart.series.push(
                    Series::line(
                        label,
                        colour,
                        taus.iter().map(|t| t - mid).collect(),
                        taus.iter()
                            .map(|&t| {
                                let (r, i) = ts.curve(tsep as f64, t);
                                if re {
                                    r
                                } else {
                                    i
                                }
                            })
                            .collect(),
                    )
                    .dashed(),
                );
            }
        }
    }
    let half = c.ratio.tseps().last().map_or(1.0, |t| *t as f64 / 2.0);
    chart.series.push(band(
        format!("final ({})", c.final_method),
        estimator_style(c.final_method).0,
        vec![-half, half],
        pick(&c.final_estimate, re),
    ));
    chart
}

/// `summation-<channel>`: one chart per showcase channel that has a summation fit.
pub(super) fn summation_charts(shown: &[(&ChannelKey, &ChannelResult)]) -> Vec<Figure> {
    shown
        .iter()
        .filter_map(|(k, c)| {
            let chart = summation_chart(k, c)?;
            Some(Figure::new(
                Plot::Summation,
                format!("summation-{}", channel_stem(k)),
                chart,
            ))
        })
        .collect()
}

fn summation_chart(k: &ChannelKey, c: &ChannelResult) -> Option<Chart> {
    let s = c.summation.as_ref()?;
    let re = signal_part(&s.slope.value);
    let part = if re { "Re" } else { "Im" };
    let x: Vec<f64> = s.tseps.iter().map(|t| *t as f64).collect();
    let slope = pick(&s.slope.value, re);
    let icpt = pick(&s.intercept, re);
    // the line and its resampled error band, half a step beyond the data on each side
    let (lo, hi) = (x.first()? - 0.5, x.last()? + 0.5);
    let grid: Vec<f64> = (0..=24).map(|j| lo + (hi - lo) * j as f64 / 24.0).collect();
    let line: Vec<Resampled> = grid
        .iter()
        .map(|&t| icpt.zip_map(slope, |i, m| i + m * t))
        .collect();
    let (colour, marker) = estimator_style(Estimator::Summation);
    Some(Chart {
        title: format!("Summed ratio {part} S(t_{{sep}}): {k}"),
        x_label: "t_{sep}".into(),
        y_label: format!("{part} S"),
        series: vec![
            Series::band(
                String::new(),
                colour,
                grid.clone(),
                line.iter().map(|v| v.central - v.error()).collect(),
                line.iter().map(|v| v.central + v.error()).collect(),
            ),
            Series::line(
                format!("fit, slope {}", value_error(slope.central, slope.error())),
                colour,
                grid,
                line.iter().map(|v| v.central).collect(),
            ),
            Series::points(
                "S(t_{sep})",
                DATA_COLOUR,
                x,
                s.sums.iter().map(|v| pick(v, re).central).collect(),
                s.sums.iter().map(|v| pick(v, re).error()).collect(),
            )
            .marker(marker),
        ],
        ..Chart::default()
    })
}

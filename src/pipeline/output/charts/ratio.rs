//! Ratio-stage plots for a few showcase channels: the ratio versus `tau` per `tsep` with the
//! plateau bands and the final estimate, and the summed ratio versus `tsep` with its line.

use super::figure::Figure;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::ratio::{ChannelKey, ChannelResult, ReIm};
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

/// `ratio-<i>`: one chart per showcase channel.
pub(super) fn ratio_charts(shown: &[(&ChannelKey, &ChannelResult)]) -> Vec<Figure> {
    shown
        .iter()
        .enumerate()
        .map(|(i, (k, c))| Figure::new(Plot::Ratio, format!("ratio-{i}"), ratio_chart(k, c)))
        .collect()
}

fn ratio_chart(k: &ChannelKey, c: &ChannelResult) -> Chart {
    let re = signal_part(&c.final_estimate);
    let part = if re { "Re" } else { "Im" };
    let mut chart = Chart {
        title: format!("Ratio {part} R(tsep, tau): {k}"),
        x_label: "tau - tsep/2".into(),
        y_label: format!("{part} R"),
        ..Chart::default()
    };
    for (i, tsep) in c.ratio.tseps().into_iter().enumerate() {
        // the plateau fit of this tsep as a band over its fit range, in the points' colour
        if let Some(pl) = c.plateaus.iter().find(|p| p.tsep == tsep) {
            let mid = tsep as f64 / 2.0;
            let x = vec![pl.tau_range.0 as f64 - mid, pl.tau_range.1 as f64 - mid];
            chart
                .series
                .push(band(String::new(), i, x, pick(&pl.fit.value, re)));
        }
        let pts: Vec<_> = c.ratio.points.iter().filter(|p| p.tsep == tsep).collect();
        chart.series.push(
            Series::points(
                format!("tsep={tsep}"),
                i,
                pts.iter()
                    .map(|p| p.tau as f64 - tsep as f64 / 2.0)
                    .collect(),
                pts.iter().map(|p| pick(&p.value, re).central).collect(),
                pts.iter().map(|p| pick(&p.value, re).error()).collect(),
            )
            .offset(0.05 * i as f64),
        );
    }
    let half = c.ratio.tseps().last().map_or(1.0, |t| *t as f64 / 2.0);
    chart.series.push(band(
        format!("final ({})", c.final_method),
        6,
        vec![-half, half],
        pick(&c.final_estimate, re),
    ));
    chart
}

/// `summation-<i>`: one chart per showcase channel that has a summation fit.
pub(super) fn summation_charts(shown: &[(&ChannelKey, &ChannelResult)]) -> Vec<Figure> {
    shown
        .iter()
        .enumerate()
        .filter_map(|(i, (k, c))| {
            let chart = summation_chart(k, c)?;
            Some(Figure::new(
                Plot::Summation,
                format!("summation-{i}"),
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
    let icpt = pick(&s.intercept, re).central;
    Some(Chart {
        title: format!("Summed ratio {part} S(tsep): {k}"),
        x_label: "tsep".into(),
        y_label: format!("{part} S"),
        series: vec![
            Series::points(
                "S(tsep)",
                0,
                x.clone(),
                s.sums.iter().map(|v| pick(v, re).central).collect(),
                s.sums.iter().map(|v| pick(v, re).error()).collect(),
            ),
            Series::line(
                format!("fit, slope {}", value_error(slope.central, slope.error())),
                1,
                x.clone(),
                x.iter().map(|t| icpt + slope.central * t).collect(),
            ),
        ],
        ..Chart::default()
    })
}

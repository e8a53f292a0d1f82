//! The binning study as a figure: for each representative point, the naive error of its
//! mean for bins of `b` configurations divided by the unbinned error, against `b`, with the
//! level `sqrt(2 tau_int)` it should reach once the bins are long enough.

use super::figure::Figure;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::report::{Chart, Series};

/// The binning study of every representative point (none when the data stage did not run
/// or no point has a study).
pub(super) fn binning(results: &RunResults) -> Option<Figure> {
    let d = results.data.as_ref()?;
    let mut chart = Chart {
        title: format!(
            "Binning study (run: bins of {}, {} bins)",
            d.bin_size, d.n_bins
        ),
        x_label: "bin size b (configurations)".into(),
        y_label: "σ(b) / σ(1)".into(),
        ..Chart::default()
    };
    let n_points = d.autocorrelation.len() as f64;
    for (colour, p) in d.autocorrelation.iter().enumerate() {
        let Some(unbinned) = p.binning.first().map(|b| b.error) else {
            continue;
        };
        // the points side by side at each bin size, so that their error bars do not overlap
        let shift = 0.12 * (colour as f64 - (n_points - 1.0) / 2.0);
        let x: Vec<f64> = p
            .binning
            .iter()
            .map(|b| b.bin_size as f64 + shift)
            .collect();
        let y: Vec<f64> = p.binning.iter().map(|b| b.error / unbinned).collect();
        // the error of a standard deviation from m bins is about sigma / sqrt(2 (m - 1))
        // (normal data, common practice)
        let e: Vec<f64> = p
            .binning
            .iter()
            .zip(&y)
            .map(|(b, r)| {
                let m = (p.n / b.bin_size) as f64;
                if b.bin_size == 1 {
                    0.0 // the reference itself
                } else {
                    r / (2.0 * (m - 1.0)).max(1.0).sqrt()
                }
            })
            .collect();
        let (Some(&first), Some(&last)) = (x.first(), x.last()) else {
            continue;
        };
        chart
            .series
            .push(Series::points(p.point.clone(), colour, x, y, e));
        if let Ok(r) = &p.result {
            let level = (2.0 * r.tau_int).sqrt();
            chart.series.push(Series::line(
                String::new(),
                colour,
                vec![first, last],
                vec![level, level],
            ));
        }
    }
    if chart.series.is_empty() {
        return None;
    }
    Some(Figure::new(Plot::Binning, "binning-study", chart))
}

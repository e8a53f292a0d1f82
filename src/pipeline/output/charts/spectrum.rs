//! Spectrum plots: effective masses with the fitted energy, and the dispersion relation.

use super::figure::Figure;
use super::style::momentum;
use crate::data::norm2;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::report::{Chart, Series};
use std::collections::BTreeSet;

/// Effective mass at one representative momentum per `|n|²` (at most five), each with the
/// fitted ground-state energy as a band over its fit range.
pub(super) fn effective_mass(results: &RunResults) -> Option<Figure> {
    let sp = results.spectrum.as_ref()?;
    let mut momenta: Vec<_> = sp.per_momentum.iter().collect();
    momenta.sort_by_key(|(p, _)| norm2(**p));
    let mut seen = BTreeSet::new();
    let mut chart = Chart {
        title: "Effective mass per momentum".into(),
        x_label: "t".into(),
        y_label: "m_{eff}(t) (lattice units)".into(),
        ..Chart::default()
    };
    for (p, m) in momenta {
        if seen.len() >= 5 || !seen.insert(norm2(*p)) {
            continue;
        }
        let colour = seen.len() - 1;
        let (mut x, mut y, mut e) = (Vec::new(), Vec::new(), Vec::new());
        for (t, v) in m.effective_mass.iter().enumerate() {
            if let Some(v) = v {
                if v.is_finite() && v.error() < 0.1 {
                    x.push(t as f64);
                    y.push(v.central);
                    e.push(v.error());
                }
            }
        }
        let en = m.ground_energy();
        let label = format!("p={}", momentum(*p));
        let (t0, t1) = (m.chosen.t_min as f64, m.chosen.t_max as f64);
        chart.series.push(Series::points(label, colour, x, y, e));
        chart.series.push(Series::band(
            String::new(),
            colour,
            vec![t0, t1],
            vec![en.central - en.error(); 2],
            vec![en.central + en.error(); 2],
        ));
    }
    Some(Figure::new(Plot::EffectiveMass, "effective-mass", chart))
}

/// Fitted energies against the continuum and lattice dispersion relations.
pub(super) fn dispersion(results: &RunResults) -> Option<Figure> {
    let sp = results.spectrum.as_ref()?;
    if sp.dispersion.is_empty() {
        return None;
    }
    let p2 = |p: [f64; 3]| p.iter().map(|x| x * x).sum::<f64>();
    let mut rows: Vec<_> = sp.dispersion.iter().collect();
    rows.sort_by(|a, b| p2(a.p).total_cmp(&p2(b.p)));
    let x: Vec<f64> = rows.iter().map(|r| p2(r.p)).collect();
    let chart = Chart {
        title: "Dispersion relation".into(),
        x_label: "p^{2} (lattice units)".into(),
        y_label: "E (lattice units)".into(),
        series: vec![
            Series::points(
                "fitted",
                0,
                x.clone(),
                rows.iter().map(|r| r.fitted.central).collect(),
                rows.iter().map(|r| r.fitted.error()).collect(),
            ),
            Series::line(
                "continuum",
                1,
                x.clone(),
                rows.iter().map(|r| r.continuum.central).collect(),
            ),
            Series::line(
                "lattice",
                2,
                x,
                rows.iter().map(|r| r.lattice.central).collect(),
            )
            .dashed(),
        ],
        ..Chart::default()
    };
    Some(Figure::new(Plot::Dispersion, "dispersion", chart))
}

//! Variational-method plots: effective energies of each state's principal correlator (per-t
//! solution, with the fitted energy as a band) and the eigenvector components versus t,
//! one chart per momentum (at most three momenta, smallest |n|² first), each file named by its
//! momentum (`gevp-energies-p0.0.1.svg`).

use super::figure::Figure;
use super::style::momentum_stem;
use crate::data::norm2;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::report::{Chart, Series};
use crate::variational::MomentumGevp;

const MAX_MOMENTA: usize = 3;

fn shown(results: &RunResults) -> Vec<&MomentumGevp> {
    let Some(v) = &results.variational else {
        return Vec::new();
    };
    let mut m: Vec<&MomentumGevp> = v.per_momentum.values().collect();
    m.sort_by_key(|g| (norm2(g.momentum), g.momentum));
    m.truncate(MAX_MOMENTA);
    m
}

fn label(p: [i32; 3]) -> String {
    format!("p=({},{},{})", p[0], p[1], p[2])
}

/// Effective energies per state with the fitted energies.
pub(super) fn effective_energies(results: &RunResults) -> Vec<Figure> {
    let mut out = Vec::new();
    for g in shown(results) {
        let mut chart = Chart {
            title: format!("GEVP effective energies per state, {}", label(g.momentum)),
            x_label: "t".into(),
            y_label: "E_eff(t) (lattice units)".into(),
            ..Chart::default()
        };
        for (n, eff) in g.effective_per_t.iter().enumerate() {
            let (mut x, mut y, mut e) = (Vec::new(), Vec::new(), Vec::new());
            for (t, v) in eff.iter().enumerate() {
                let Some(v) = v else { continue };
                if t > g.correlators.t0 && v.is_finite() && v.error() < 0.2 {
                    x.push(t as f64);
                    y.push(v.central);
                    e.push(v.error());
                }
            }
            chart
                .series
                .push(Series::points(format!("state {n}"), n, x, y, e));
            if let Some(Some(s)) = g.states.get(n) {
                let en = s.ground_energy();
                let (t0, t1) = (s.chosen.t_min as f64, s.chosen.t_max as f64);
                chart.series.push(Series::band(
                    String::new(),
                    n,
                    vec![t0, t1],
                    vec![en.central - en.error(); 2],
                    vec![en.central + en.error(); 2],
                ));
            }
        }
        out.push(Figure::new(
            Plot::GevpEnergies,
            format!("gevp-energies-p{}", momentum_stem(g.momentum)),
            chart,
        ));
    }
    out
}

/// Eigenvector components versus t (not `t0`) per state and operator.
pub(super) fn vectors(results: &RunResults) -> Vec<Figure> {
    let Some(v) = &results.variational else {
        return Vec::new();
    };
    let mut out = Vec::new();
    for g in shown(results) {
        let mut chart = Chart {
            title: format!("GEVP eigenvector components, {}", label(g.momentum)),
            x_label: "t".into(),
            y_label: "v_n,i(t) (normalised to v^T C(t0) v = 1)".into(),
            ..Chart::default()
        };
        let n = v.operators.len();
        for state in 0..n {
            for (k, op) in v.operators.iter().enumerate() {
                let (mut x, mut y, mut e) = (Vec::new(), Vec::new(), Vec::new());
                for (t, at) in g.correlators.vectors.iter().enumerate() {
                    let Some(c) = at.as_ref().map(|a| &a[state][k]) else {
                        continue;
                    };
                    if c.is_finite() && c.error() < 1.0 + c.central.abs() {
                        x.push(t as f64);
                        y.push(c.central);
                        e.push(c.error());
                    }
                }
                let colour = state * n + k;
                chart.series.push(Series::points(
                    format!("state {state}, {op}"),
                    colour,
                    x,
                    y,
                    e,
                ));
            }
        }
        out.push(Figure::new(
            Plot::GevpVectors,
            format!("gevp-vectors-p{}", momentum_stem(g.momentum)),
            chart,
        ));
    }
    out
}

//! The variational-method tables: principal correlators and their effective energies per
//! state and solution, eigenvector components versus t, the energies fitted to the
//! principal correlators, and the optimised against the single-operator results.

use super::cells::{float, opt};
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};
use crate::resample::Resampled;
use crate::Result;

fn momentum_cells(p: [i32; 3]) -> Vec<Cell> {
    vec![Cell::from(p[0]), Cell::from(p[1]), Cell::from(p[2])]
}

/// `gevp_correlators`: per momentum, state, solution and t the principal correlator and its
/// effective energy `ln(c(t)/c(t+1))`.
pub(super) fn correlators(name: &str, results: &RunResults) -> Result<Table> {
    let cols = [
        "px",
        "py",
        "pz",
        "state",
        "solution",
        "t",
        "value",
        "error",
        "effective_energy",
        "effective_error",
    ];
    let mut t = Table::new(name, &cols);
    let Some(v) = &results.variational else {
        return Ok(t);
    };
    for (p, g) in &v.per_momentum {
        let pc = &g.correlators;
        let solutions = [
            ("per_t", &pc.lambda, &g.effective_per_t),
            ("fixed", &pc.fixed, &g.effective_fixed),
        ];
        for (label, values, effective) in solutions {
            for (n, (c, eff)) in values.iter().zip(effective).enumerate() {
                for (time, value) in c.iter().enumerate() {
                    let e = eff.get(time).and_then(Option::as_ref);
                    let mut cells = momentum_cells(*p);
                    cells.extend([
                        Cell::from(n),
                        Cell::from(label),
                        Cell::from(time),
                        float(value.central),
                        float(value.error()),
                        opt(e.map(|e| e.central)),
                        opt(e.map(Resampled::error)),
                    ]);
                    t.push_row(cells)?;
                }
            }
        }
    }
    Ok(t)
}

/// `gevp_vectors`: every eigenvector component per momentum, state and t (not `t0`), with
/// its resampled error; normalised to `v^T C(t0) v = 1`.
pub(super) fn vectors(name: &str, results: &RunResults) -> Result<Table> {
    let cols = ["px", "py", "pz", "state", "operator", "t", "value", "error"];
    let mut t = Table::new(name, &cols);
    let Some(v) = &results.variational else {
        return Ok(t);
    };
    for (p, g) in &v.per_momentum {
        for (time, at) in g.correlators.vectors.iter().enumerate() {
            let Some(at) = at else { continue };
            for (n, comps) in at.iter().enumerate() {
                for (op, c) in v.operators.iter().zip(comps) {
                    let mut cells = momentum_cells(*p);
                    cells.extend([
                        Cell::from(n),
                        Cell::from(op.as_str()),
                        Cell::from(time),
                        float(c.central),
                        float(c.error()),
                    ]);
                    t.push_row(cells)?;
                }
            }
        }
    }
    Ok(t)
}

/// `gevp_energies`: the energy of each state from the fits to its principal correlator.
pub(super) fn energies(name: &str, results: &RunResults) -> Result<Table> {
    let cols = [
        "px", "py", "pz", "state", "solution", "energy", "error", "t_min", "t_max", "chi2_dof",
        "p_value",
    ];
    let mut t = Table::new(name, &cols);
    let Some(v) = &results.variational else {
        return Ok(t);
    };
    let solution = match v.settings.energies_from {
        crate::spectrum::GevpSolutionKind::PerT => "per_t",
        crate::spectrum::GevpSolutionKind::Fixed => "fixed",
    };
    for (p, g) in &v.per_momentum {
        for (n, s) in g.states.iter().enumerate() {
            let Some(s) = s else { continue };
            let e = s.ground_energy();
            let mut cells = momentum_cells(*p);
            cells.extend([
                Cell::from(n),
                Cell::from(solution),
                float(e.central),
                float(e.error()),
                Cell::from(s.chosen.t_min),
                Cell::from(s.chosen.t_max),
                float(s.chosen.chi2_per_dof),
                float(s.chosen.p_value),
            ]);
            t.push_row(cells)?;
        }
    }
    Ok(t)
}

/// `operator_comparison`: the optimised operators' results beside those of one operator of
/// the basis (`spectrum.gevp.compare_operator`): ground energies per momentum, matrix
/// elements per channel and estimator (real part), form factors per estimator and shell.
pub(super) fn comparison(name: &str, results: &RunResults) -> Result<Table> {
    let cols = [
        "quantity",
        "key",
        "method",
        "optimised",
        "optimised_error",
        "operator",
        "single",
        "single_error",
    ];
    let mut t = Table::new(name, &cols);
    let (Some(c), Some(sp)) = (&results.comparison, &results.spectrum) else {
        return Ok(t);
    };
    let mut row = |quantity: &str, key: String, method: String, a: &Resampled, b: &Resampled| {
        t.push_row(vec![
            Cell::from(quantity),
            Cell::from(key),
            Cell::from(method),
            float(a.central),
            float(a.error()),
            Cell::from(c.operator.as_str()),
            float(b.central),
            float(b.error()),
        ])
    };
    for (p, m) in &sp.per_momentum {
        if let Some(s) = c.spectrum.per_momentum.get(p) {
            let key = format!("({},{},{})", p[0], p[1], p[2]);
            row(
                "energy",
                key,
                "spectrum".into(),
                m.ground_energy(),
                s.ground_energy(),
            )?;
        }
    }
    if let (Some(opt), Some(single)) = (&results.channels, &c.channels) {
        for (k, a) in opt {
            let Some(b) = single.get(k) else { continue };
            for ((ea, fa), (eb, fb)) in a.estimates().into_iter().zip(b.estimates()) {
                if ea == eb {
                    row(
                        "matrix_element",
                        k.to_string(),
                        ea.to_string(),
                        &fa.value.re,
                        &fb.value.re,
                    )?;
                }
            }
        }
    }
    for a in &results.form_factors {
        let same = |b: &&crate::pipeline::run::FormFactorRow| {
            b.method == a.method && b.form_factor == a.form_factor && b.shell == a.shell
        };
        if let Some(b) = c.form_factors.iter().find(same) {
            let key = format!("{} {}", a.form_factor, a.shell);
            row(
                "form_factor",
                key,
                a.method.to_string(),
                &a.value.value,
                &b.value.value,
            )?;
        }
    }
    Ok(t)
}

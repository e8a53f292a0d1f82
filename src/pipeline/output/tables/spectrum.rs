//! The spectrum tables: energies per momentum and state, and the dispersion check.

use super::cells::{float, opt};
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};
use crate::spectrum::ChosenFit;
use crate::Result;

/// `spectrum`: energies per momentum and state with the quality of the fit they come from.
pub(super) fn energies(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "px", "py", "pz", "state", "energy", "error", "t_min", "t_max", "n_states", "chi2_dof",
            "p_value",
        ],
    );
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for (p, m) in &sp.per_momentum {
        for (n, e) in m.energies.iter().enumerate() {
            // the ground state is the model average; excited states come from the best
            // multi-state fit
            let fit = if n == 0 {
                Some(&m.chosen)
            } else {
                m.excited.as_ref()
            };
            let q = |f: fn(&ChosenFit) -> f64| opt(fit.map(f));
            t.push_row(vec![
                Cell::from(p[0]),
                Cell::from(p[1]),
                Cell::from(p[2]),
                Cell::from(n),
                float(e.central),
                float(e.error()),
                q(|f| f.t_min as f64),
                q(|f| f.t_max as f64),
                q(|f| f.n_states as f64),
                q(|f| f.chi2_per_dof),
                q(|f| f.p_value),
            ])?;
        }
    }
    Ok(t)
}

/// `dispersion`: fitted energies against the continuum and lattice dispersion relations.
pub(super) fn dispersion(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "px",
            "py",
            "pz",
            "fitted",
            "error",
            "continuum",
            "lattice",
            "continuum_sigma",
            "lattice_sigma",
        ],
    );
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for r in &sp.dispersion {
        t.push_row(vec![
            Cell::from(r.momentum[0]),
            Cell::from(r.momentum[1]),
            Cell::from(r.momentum[2]),
            float(r.fitted.central),
            float(r.fitted.error()),
            float(r.continuum.central),
            float(r.lattice.central),
            float(r.continuum_sigma),
            float(r.lattice_sigma),
        ])?;
    }
    Ok(t)
}

//! The spectrum tables: energies per momentum and state, and the dispersion check.

use super::cells::{float, opt};
use crate::pipeline::run::RunResults;
use crate::report::{Cell, Table};
use crate::spectrum::ChosenFit;
use crate::Result;

/// `spectrum`: energies per momentum and state. `source` says where each row comes from:
/// `model_average` (the ground state; the fit columns then describe the highest-weight fit of
/// the average), `multi_state_average` (the first excited state averaged over the included
/// multi-state fits, as the ratio stage takes it; the fit columns describe the highest-weight
/// of them) or `best_multi_state_fit` (higher states, or the first when no multi-state fit is
/// included: from that one fit).
pub(super) fn energies(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "px", "py", "pz", "state", "source", "energy", "error", "t_min", "t_max", "n_states",
            "chi2_dof", "p_value",
        ],
    );
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for (p, m) in &sp.per_momentum {
        for (n, e) in m.energies.iter().enumerate() {
            let averaged = m.average.excited.as_ref().filter(|_| n == 1);
            let (source, fit) = if n == 0 {
                ("model_average", Some(&m.chosen))
            } else if averaged.is_some() {
                ("multi_state_average", m.excited.as_ref())
            } else {
                ("best_multi_state_fit", m.excited.as_ref())
            };
            let (e, err) = match averaged {
                Some(x) => (&x.energy, x.energy.error()),
                // The model average's error is its Jay–Neil error; a single fit's excited
                // energy is quoted like every fit's, without the resamples that jumped.
                None if n == 0 => (e, e.error()),
                None => (e, e.robust_error()),
            };
            let int = |f: fn(&ChosenFit) -> usize| {
                fit.map_or(Cell::Float(f64::NAN), |x| Cell::from(f(x)))
            };
            let q = |f: fn(&ChosenFit) -> f64| opt(fit.map(f));
            t.push_row(vec![
                Cell::from(p[0]),
                Cell::from(p[1]),
                Cell::from(p[2]),
                Cell::from(n),
                Cell::Text(source.into()),
                float(e.central),
                float(err),
                int(|f| f.t_min),
                int(|f| f.t_max),
                int(|f| f.n_states),
                q(|f| f.chi2_per_dof),
                q(|f| f.p_value),
            ])?;
        }
    }
    Ok(t)
}

/// `spectrum_fits`: every fit window and number of states of the model average at every
/// momentum, with its weight and, when it was left out, the reason.
pub(super) fn fits(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        name,
        &[
            "px",
            "py",
            "pz",
            "t_min",
            "t_max",
            "n_states",
            "chi2_dof",
            "p_value",
            "weight",
            "e0",
            "e0_error",
            "e1",
            "e1_error",
            "included",
            "excluded_reason",
        ],
    );
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for (p, m) in &sp.per_momentum {
        for r in &m.average.table {
            let dof = if r.dof > 0 {
                r.chi2 / r.dof as f64
            } else {
                f64::NAN
            };
            t.push_row(vec![
                Cell::from(p[0]),
                Cell::from(p[1]),
                Cell::from(p[2]),
                Cell::from(r.t_min),
                Cell::from(r.t_max),
                Cell::from(r.n_states),
                float(dof),
                float(r.p_value),
                float(r.weight),
                float(r.energy),
                float(r.energy_error),
                opt(r.excited_energy),
                opt(r.excited_energy_error),
                Cell::Text(if r.excluded.is_none() { "yes" } else { "no" }.into()),
                Cell::Text(r.excluded.clone().unwrap_or_default()),
            ])?;
        }
    }
    Ok(t)
}

/// `effective_mass`: the effective mass per momentum and time slice where it is defined.
pub(super) fn effective_mass(name: &str, results: &RunResults) -> Result<Table> {
    let mut t = Table::new(name, &["px", "py", "pz", "t", "value", "error"]);
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for (p, m) in &sp.per_momentum {
        for (time, v) in m.effective_mass.iter().enumerate() {
            if let Some(v) = v {
                t.push_row(vec![
                    Cell::from(p[0]),
                    Cell::from(p[1]),
                    Cell::from(p[2]),
                    Cell::from(time),
                    float(v.central),
                    float(v.error()),
                ])?;
            }
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

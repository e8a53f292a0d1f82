//! Dispersion check (docs/methods.md §2): fitted `E(p)` against the continuum relation
//! `E^2 = m^2 + p^2` and the lattice (free boson) relation
//! `sinh^2(E/2) = sinh^2(m/2) + sum_i sin^2(p_i/2)` from the fitted mass, each difference in
//! units of its own resampled error (the error of the difference, not errors in quadrature).
//! Momenta in lattice units and the two relations come from [`crate::kinematics`], the one
//! place that defines them; this module applies them per resample.

use crate::data::Momentum;
use crate::kinematics;
use crate::resample::Resampled;
use serde::Serialize;

/// Continuum dispersion energy `sqrt(m^2 + p^2)`, per resample.
pub fn continuum_energy(mass: &Resampled, p: [f64; 3]) -> Resampled {
    mass.map(|m| kinematics::continuum_energy(m, p))
}

/// Lattice dispersion energy `2 asinh(sqrt(sinh^2(m/2) + sum sin^2(p_i/2)))`, per resample.
pub fn lattice_energy(mass: &Resampled, p: [f64; 3]) -> Resampled {
    mass.map(|m| kinematics::lattice_dispersion_energy(m, p))
}

/// One momentum of the dispersion table.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DispersionRow {
    /// Integer momentum.
    pub momentum: Momentum,
    /// Momentum in lattice units.
    pub p: [f64; 3],
    /// Fitted ground-state energy.
    pub fitted: Resampled,
    /// Continuum dispersion energy from the fitted mass.
    pub continuum: Resampled,
    /// Lattice dispersion energy from the fitted mass.
    pub lattice: Resampled,
    /// `(fitted - continuum) / error(fitted - continuum)`.
    pub continuum_sigma: f64,
    /// `(fitted - lattice) / error(fitted - lattice)`.
    pub lattice_sigma: f64,
}

fn sigma(d: &Resampled) -> f64 {
    let e = d.error();
    if e > 0.0 {
        d.central / e
    } else {
        f64::NAN
    }
}

/// The dispersion row of one momentum.
pub fn check(
    momentum: Momentum,
    p: [f64; 3],
    fitted: &Resampled,
    mass: &Resampled,
) -> DispersionRow {
    let continuum = continuum_energy(mass, p);
    let lattice = lattice_energy(mass, p);
    DispersionRow {
        momentum,
        p,
        continuum_sigma: sigma(&(fitted - &continuum)),
        lattice_sigma: sigma(&(fitted - &lattice)),
        fitted: fitted.clone(),
        continuum,
        lattice,
    }
}

//! The hadron mass from the fit at integer momentum (0,0,0) (docs/methods.md §1, §2).
//!
//! Why it exists: without a twist at (0,0,0) that fit's ground energy is the mass. With
//! twisted boundary conditions the two-point function at `n = (0,0,0)` carries the lattice
//! momentum `p0 = theta / L`, so its fit gives `E(p0)`, not `m`; every use of the mass (the
//! kinematic factors, the dispersion reference, Q², the `E(p) >= m` gate, the carried priors)
//! then takes `m` per resample from the inverted dispersion relation, continuum
//! `m² = E² - p0²` or lattice `sinh²(m/2) = sinh²(E/2) - sum_i sin²(p0_i/2)`.

use super::SpectrumSettings;
use crate::data::Momentum;
use crate::error::{Error, Result};
use crate::kinematics::Dispersion;
use crate::resample::Resampled;

/// Integer momentum of the rest frame.
pub(super) const REST: Momentum = [0, 0, 0];

/// The lattice momentum of the two-point function at (0,0,0) when it carries a twist.
pub(super) fn twisted_rest(settings: &SpectrumSettings) -> Option<[f64; 3]> {
    (settings.twist_at(REST) != [0.0; 3])
        .then(|| settings.lattice_momentum(REST))
        .flatten()
}

/// A 3-vector with four decimals, for messages.
fn vec3(v: [f64; 3]) -> String {
    format!("({:.4}, {:.4}, {:.4})", v[0], v[1], v[2])
}

/// An energy of the fit at (0,0,0) carried to lattice momentum `p` by `relation`: through the
/// mass that `relation` gives it (itself when (0,0,0) is untwisted).
pub(super) fn carried_energy(
    e_rest: f64,
    p: [f64; 3],
    relation: Dispersion,
    settings: &SpectrumSettings,
) -> f64 {
    let m = match twisted_rest(settings) {
        Some(p0) => relation.mass(e_rest, p0),
        None => e_rest,
    };
    relation.energy(m, p)
}

/// The mass from the ground energy `rest` of the fit at (0,0,0), and the warning that says
/// how it was obtained when that fit is twisted. An error when the inverted relation has no
/// positive mass on some resample (the twisted energy below `|p0|`).
pub(super) fn mass(
    rest: &Resampled,
    settings: &SpectrumSettings,
) -> Result<(Resampled, Option<String>)> {
    let Some(p0) = twisted_rest(settings) else {
        return Ok((rest.clone(), None));
    };
    let relation = settings.mass_dispersion;
    let mass = rest.map(|e| relation.mass(e, p0));
    let bad = mass.samples.iter().filter(|m| !m.is_finite()).count()
        + usize::from(!mass.central.is_finite());
    let (theta, p) = (vec3(settings.twist_at(REST)), vec3(p0));
    if bad > 0 {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "momentum (0,0,0) carries the twist theta = {theta}, so its fit gives the \
                 energy E = {rest} at p = theta / L = {p}, not the mass; the {} dispersion \
                 relation gives no positive mass from it on {bad} of {} values (E at or below \
                 the twisted momentum). Check the twist angles and the fit range at (0,0,0)",
                relation.name(),
                mass.samples.len() + 1
            ),
        ));
    }
    let formula = match relation {
        Dispersion::Continuum => "m² = E² - p²",
        Dispersion::Lattice => "sinh²(m/2) = sinh²(E/2) - sum sin²(p_i/2)",
    };
    let note = format!(
        "the two-point function at momentum (0,0,0) carries the twist theta = {theta} (p = \
         {p}), so its fit gives E = {rest}, not the mass; the mass used downstream (kinematic \
         factors, Q², dispersion check, E(p) >= m gate) is m = {mass}, per resample from the {} \
         dispersion relation {formula}",
        relation.name()
    );
    Ok((mass, Some(note)))
}

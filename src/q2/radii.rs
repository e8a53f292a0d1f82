//! Dirac and Pauli radii and the anomalous moment from the Sachs fits (methods.md §6).
//!
//! Why it exists: the Sachs fits give `G_E` and `G_M` at `Q² = 0` with their slopes; the
//! Dirac/Pauli decomposition is what many comparisons quote, and it needs both fits and the
//! hadron mass on the same resamples.

use super::q2_error;
use super::result::Q2Fit;
use crate::resample::Resampled;
use crate::Result;
use serde::Serialize;

/// Dirac and Pauli radii from the Sachs fits, per resample, through
/// `F1 = (G_E + tau G_M)/(1 + tau)`, `F2 = (G_M - G_E)/(1 + tau)`, `tau = Q²/(4 m²)`:
/// `F1'(0) = G_E'(0) + (G_M(0) - G_E(0))/(4m²)`, `F2'(0) = G_M'(0) - G_E'(0) - (G_M(0) - G_E(0))/(4m²)`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DiracPauli {
    /// Anomalous moment `kappa = F2(0) = G_M(0) - G_E(0)`.
    pub kappa: Resampled,
    /// Dirac radius squared in units of `1/Q²`.
    pub r1_2: Resampled,
    /// Pauli radius squared in units of `1/Q²`.
    pub r2_2: Resampled,
    /// Dirac radius squared in fm², when the units allow.
    pub r1_2_fm2: Option<Resampled>,
    /// Pauli radius squared in fm², when the units allow.
    pub r2_2_fm2: Option<Resampled>,
}

/// Dirac and Pauli radii from fits of `G_E` and `G_M` in the same units; `mass` is the hadron
/// mass in the units of `sqrt(Q²)` (lattice mass for lattice units, GeV for GeV²).
pub fn dirac_pauli_radii(ge: &Q2Fit, gm: &Q2Fit, mass: &Resampled) -> Result<DiracPauli> {
    if ge.units != gm.units {
        return Err(q2_error("G_E and G_M fits use different Q2 units"));
    }
    if ge.g0.len() != mass.len() || gm.g0.len() != mass.len() {
        return Err(q2_error(
            "G_E, G_M fits and the mass have different sample counts",
        ));
    }
    let vals = [&ge.g0, &ge.slope, &gm.g0, &gm.slope, mass];
    let kappa = &gm.g0 - &ge.g0;
    let r1_2 = Resampled::combine(&vals, |v| {
        let (e0, e1, m0, m) = (v[0], v[1], v[2], v[4]);
        -6.0 * (e1 + (m0 - e0) / (4.0 * m * m)) / e0
    });
    let r2_2 = Resampled::combine(&vals, |v| {
        let (e0, e1, m0, m1, m) = (v[0], v[1], v[2], v[3], v[4]);
        -6.0 * (m1 - e1 - (m0 - e0) / (4.0 * m * m)) / (m0 - e0)
    });
    let f = ge.units.length2_to_fm2();
    Ok(DiracPauli {
        kappa,
        r1_2_fm2: f.map(|f| &r1_2 * f),
        r2_2_fm2: f.map(|f| &r2_2 * f),
        r1_2,
        r2_2,
    })
}

//! Lattice momenta, energies and Q² (docs/methods.md §1, §5).
//!
//! Momenta on a periodic lattice are `p = (2 pi n + theta) / L` with an optional twist angle
//! `theta` (twisted boundary conditions); energies come from the continuum dispersion relation
//! `E² = m² + p²` or its lattice form `sinh²(E/2) = sinh²(m/2) + sum_i sin²(p_i/2)`.
//! Everything is in lattice units; [`HBARC_GEV_FM`] converts at the edges.

use crate::data::Momentum;
use std::f64::consts::PI;

/// `hbar c` in GeV fm (CODATA 2022: 197.3269804 MeV fm, exact since the 2019 SI, table
/// value truncated).
pub const HBARC_GEV_FM: f64 = 0.1973269804;

/// On-shell kinematics of one channel in lattice units: hadron mass, sink and source
/// three-momenta, sink and source energies.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct OnShell {
    /// Hadron mass.
    pub mass: f64,
    /// Sink three-momentum.
    pub pf: [f64; 3],
    /// Source three-momentum.
    pub pi: [f64; 3],
    /// Sink energy.
    pub ef: f64,
    /// Source energy.
    pub ei: f64,
}

/// Physical lattice momentum `(2 pi n + theta) / L` of an integer momentum `n` on a lattice of
/// spatial extent `l` with twist angles `twist` (radians, per direction).
pub fn lattice_momentum(n: Momentum, l: usize, twist: [f64; 3]) -> [f64; 3] {
    let l = l as f64;
    [0, 1, 2].map(|i| (2.0 * PI * f64::from(n[i]) + twist[i]) / l)
}

/// Continuum dispersion relation `E = sqrt(m² + p²)`.
pub fn continuum_energy(mass: f64, p: [f64; 3]) -> f64 {
    (mass * mass + dot(p, p)).sqrt()
}

/// Lattice dispersion relation of a free boson: `sinh²(E/2) = sinh²(m/2) + sum_i sin²(p_i/2)`.
pub fn lattice_dispersion_energy(mass: f64, p: [f64; 3]) -> f64 {
    let s = (mass / 2.0).sinh().powi(2) + p.iter().map(|x| (x / 2.0).sin().powi(2)).sum::<f64>();
    2.0 * s.sqrt().asinh()
}

/// The mass from an energy `e` at momentum `p` by the inverted continuum relation
/// `m² = E² - p²`; NaN when `E² <= p²` (no mass has that energy there).
pub fn continuum_mass(e: f64, p: [f64; 3]) -> f64 {
    let m2 = e * e - dot(p, p);
    if m2 > 0.0 {
        m2.sqrt()
    } else {
        f64::NAN
    }
}

/// The mass from an energy `e` at momentum `p` by the inverted lattice relation
/// `sinh²(m/2) = sinh²(E/2) - sum_i sin²(p_i/2)`; NaN when the right side is not positive.
pub fn lattice_dispersion_mass(e: f64, p: [f64; 3]) -> f64 {
    let s = (e / 2.0).sinh().powi(2) - p.iter().map(|x| (x / 2.0).sin().powi(2)).sum::<f64>();
    if s > 0.0 {
        2.0 * s.sqrt().asinh()
    } else {
        f64::NAN
    }
}

/// `Q² = |p_f - p_i|² - (E_f - E_i)²`, which equals `q.q` of the Euclidean four-vector
/// `q = P_f - P_i` with `P = (p, iE)`.
pub fn q_squared(k: &OnShell) -> f64 {
    let d = [0, 1, 2].map(|i| k.pf[i] - k.pi[i]);
    dot(d, d) - (k.ef - k.ei).powi(2)
}

/// Q² in lattice units to GeV², for lattice spacing `a_fm` in fm.
pub fn q2_to_gev2(q2_lattice: f64, a_fm: f64) -> f64 {
    q2_lattice * (HBARC_GEV_FM / a_fm).powi(2)
}

/// An energy (or mass) in lattice units to GeV, for lattice spacing `a_fm` in fm.
pub fn energy_to_gev(e_lattice: f64, a_fm: f64) -> f64 {
    e_lattice * HBARC_GEV_FM / a_fm
}

pub(crate) fn dot(a: [f64; 3], b: [f64; 3]) -> f64 {
    a[0] * b[0] + a[1] * b[1] + a[2] * b[2]
}

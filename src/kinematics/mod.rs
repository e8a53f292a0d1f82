//! Kinematics and form-factor decomposition (docs/methods.md §1, §5).
//!
//! Why it exists: the plateau of the three-point/two-point ratio is not a form factor but a
//! frame-, projector- and current-dependent linear combination of form factors. This module
//! computes lattice momenta (with optional twisted boundary conditions), energies and Q², the
//! kinematic coefficients of that combination from the Dirac trace of docs/methods.md §5, and
//! solves the over-determined linear system of all channels in a Q² shell by weighted least
//! squares, per resample.
//!
//! Conventions: Euclidean Hermitian gamma matrices, `gamma_5 = gamma_1 gamma_2 gamma_3 gamma_4`,
//! `sigma_mu_nu = [gamma_mu, gamma_nu]/(2i)`, on-shell `P = (p, iE)`, `q = P_f - P_i`, projectors
//! `Gamma_0 = (1 + gamma_4)/2`, `Gamma_k = Gamma_0 i gamma_5 gamma_k`. Sign checks (sink at rest):
//! `Pi(Gamma_0, V_4) = sqrt((E+m)/(2E)) G_E`, `Pi(Gamma_k, V_j) = eps_jkl q_l G_M / N`,
//! forward `Pi(Gamma_k, A_k) = i g_A`, `Pi(Gamma_0, S) = g_S`, `Pi(Gamma_3, T_12) = g_T`.

mod decompose;
mod dirac;
mod expansion;
mod factors;
mod momentum;
mod phase;
pub mod renorm;
mod setup;
mod twists;

pub use decompose::{
    decompose, decompose_cached, ChannelValue, CoefficientCache, Decomposition,
    DecompositionSettings, ShellResult, SkippedShell, SINGULAR_THRESHOLD,
};
pub use phase::Phase;
pub use renorm::{renormalize, Renormalized, ZFactor, ZFactors};
pub use setup::{Dispersion, Energies, EnergySource, KinematicSetup};
pub use twists::twists_by_side;

pub use factors::{coefficients, FormFactor, Hadron};
pub use momentum::{
    continuum_energy, continuum_mass, energy_to_gev, lattice_dispersion_energy,
    lattice_dispersion_mass, lattice_momentum, q2_to_gev2, q_squared, OnShell, HBARC_GEV_FM,
};

//! Q² dependence of form factors: dipole and z-expansion fits per resample, and the derived
//! radii, moments and charges (docs/methods.md §6).
//!
//! Why it exists: the decomposition gives form factors at a handful of Q² shells; the physics
//! lives in their value and slope at `Q² = 0`. Two shapes are fitted, each on the central
//! value and on every resample with weights held fixed (common practice):
//! - dipole `G(Q²) = G(0) / (1 + Q²/M²)^p` (p = 2 by default), `r² = 6 p / M²`;
//! - z-expansion (Hill & Paz, Phys. Rev. D 82 (2010) 113005) `G = sum_k a_k z^k`, Gaussian
//!   priors on `a_k / a_0`, optional large-Q² sum rules `sum_k k^n a_k = 0`, `n = 0..3`
//!   (Lee, Arrington & Hill, Phys. Rev. D 92 (2015) 013013) imposed exactly by eliminating
//!   the highest coefficients.
//!
//! Derived: `r² = -6 G'(0)/G(0)` (fm² through the lattice spacing or `hbar c`), `G(0)` (the
//! magnetic moment for `G_M`, the axial charge for `G_A`), and Dirac/Pauli radii from the
//! Sachs fits ([`dirac_pauli_radii`]).

mod fitting;
mod priors;
mod radii;
mod result;
mod settings;
mod shapes;

pub use fitting::fit;
pub use priors::{
    auto_prior, centre_shifts, z_coefficients, PriorRule, ZPrior, AUTO_FACTOR, MIN_AUTO_WIDTH,
    PRIOR_DOMINATED, PRIOR_EDGE,
};
pub use radii::{dirac_pauli_radii, DiracPauli};
pub use result::{KmaxStudy, Q2Fit, Q2Point, Q2Units};
pub use settings::{Q2FitSettings, Q2Model, TCut, T0};
pub use shapes::{dz_dq2, t0_optimal, z, Shape, ZExpansion};

use crate::Error;

/// An error of the Q² stage.
pub(crate) fn q2_error(message: impl Into<String>) -> Error {
    Error::analysis("q2", message)
}

//! The noise-free truth of a mock ensemble: spectrum, overlaps, form factors and the mean
//! correlators built from them.
//!
//! - Energies from the masses by the continuum or lattice dispersion relation (docs/methods.md §2).
//! - Overlaps fall with momentum like a Gaussian-smeared source, `Z_n(p) = Z_n(0) e^{-|p|^2 w^2 / 4}`;
//!   the two-point amplitude is `A_n(p) = Z_n(p)^2`.
//! - `C2(t, p) = sum_n A_n(p) e^{-E_n(p) t}` (or the periodic symmetric form for spin 0).
//! - `C3(tsep, tau) = Pi sum_{m,n} r_{mn} sqrt(A_m(p_f) A_n(p_i)) e^{-E_m(p_f) (tsep - tau)} e^{-E_n(p_i) tau}`
//!   with `Pi = sum_k K_k G_k(Q^2)` the ground-state matrix element (docs/methods.md §5) and `r` the
//!   transition strengths relative to it (`r_00 = 1`). With `r_00` alone the ratio of docs/methods.md §3
//!   equals `Pi` exactly; the excited terms are the `b` terms of the two-state form of §4.
//! - Form factors: dipole, z-expansion (Hill & Paz, Phys. Rev. D 82 (2010) 113005) and, for
//!   `G_P`, pion-pole dominance `G_P = 4 m^2 G_A / (Q^2 + m_pi^2)`.

use super::spec::{FormFactorModel, FormFactorSpec, HadronSpec};
use crate::data::Momentum;
use crate::kinematics;
use nalgebra::Complex;

/// One state at one momentum.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Level {
    /// Energy `E_n(p)` (lattice units).
    pub energy: f64,
    /// Overlap `Z_n(p)`.
    pub overlap: f64,
    /// Two-point amplitude `A_n(p) = Z_n(p)^2`.
    pub amplitude: f64,
}

/// The spectrum at one lattice momentum.
#[derive(Clone, Debug, PartialEq)]
pub struct MomentumLevels {
    /// Integer momentum.
    pub n: Momentum,
    /// Lattice momentum `(2 pi n + theta) / L`.
    pub p: [f64; 3],
    /// Ground state first.
    pub levels: Vec<Level>,
}

/// The spectrum of `hadron` at integer momentum `n` on an `L^3` lattice with twist angles
/// `twist` (radians): lattice momentum `p = (2 pi n + theta) / L`.
pub fn levels(hadron: &HadronSpec, l: usize, n: Momentum, twist: [f64; 3]) -> MomentumLevels {
    let p = kinematics::lattice_momentum(n, l, twist);
    let p2: f64 = p.iter().map(|x| x * x).sum();
    let w = hadron.smearing_width.0;
    let levels = hadron
        .states
        .iter()
        .map(|s| {
            let energy = hadron.dispersion.energy(s.mass.0, p);
            let overlap = s.overlap.0 * (-p2 * w * w / 4.0).exp();
            Level {
                energy,
                overlap,
                amplitude: overlap * overlap,
            }
        })
        .collect();
    MomentumLevels { n, p, levels }
}

/// Mean two-point function at time `t`; `periodic` adds the backward-propagating term.
pub fn twopt_mean(s: &MomentumLevels, t: usize, extent: usize, periodic: bool) -> f64 {
    s.levels
        .iter()
        .map(|l| {
            let forward = (-l.energy * t as f64).exp();
            let backward = if periodic {
                (-l.energy * (extent - t) as f64).exp()
            } else {
                0.0
            };
            l.amplitude * (forward + backward)
        })
        .sum()
}

/// Ground-state envelope `sqrt(A_0(p_f) A_0(p_i)) e^{-E_0(p_f) (tsep - tau) - E_0(p_i) tau}`.
pub fn envelope(sink: &MomentumLevels, source: &MomentumLevels, tsep: usize, tau: usize) -> f64 {
    let (f, i) = (sink.levels[0], source.levels[0]);
    (f.amplitude * i.amplitude).sqrt()
        * (-f.energy * (tsep - tau) as f64 - i.energy * tau as f64).exp()
}

/// Mean three-point function at `(tsep, tau)` for ground-state matrix element `pi` and
/// transition strengths `r[m][n]` (sink state `m`, source state `n`).
pub fn threept_mean(
    sink: &MomentumLevels,
    source: &MomentumLevels,
    tsep: usize,
    tau: usize,
    pi: Complex<f64>,
    r: &[Vec<f64>],
) -> Complex<f64> {
    let mut sum = 0.0;
    for (m, f) in sink.levels.iter().enumerate() {
        for (n, i) in source.levels.iter().enumerate() {
            let strength = r[m][n];
            if strength != 0.0 {
                sum += strength
                    * (f.amplitude * i.amplitude).sqrt()
                    * (-f.energy * (tsep - tau) as f64 - i.energy * tau as f64).exp();
            }
        }
    }
    pi * sum
}

/// What a form-factor model needs beside `Q^2`.
#[derive(Clone, Copy, Debug)]
pub struct FormFactorContext<'a> {
    /// Ground-state mass of the hadron.
    pub mass: f64,
    /// Pion mass, for pion-pole dominance.
    pub m_pi: Option<f64>,
    /// All models (pion-pole `G_P` reads `G_A`).
    pub models: &'a FormFactorSpec,
}

/// Value of a model at `Q^2` (lattice units); `None` when a pion-pole model lacks `G_A` or `m_pi`
/// (ruled out by spec validation).
pub fn form_factor(model: &FormFactorModel, q2: f64, cx: &FormFactorContext) -> Option<f64> {
    match model {
        FormFactorModel::Dipole {
            value_at_zero,
            mass,
        } => Some(value_at_zero / (1.0 + q2 / (mass.0 * mass.0)).powi(2)),
        FormFactorModel::ZExpansion {
            t_cut,
            t0,
            coefficients,
        } => {
            let z = z_variable(q2, t_cut.0, *t0);
            Some(coefficients.iter().rev().fold(0.0, |acc, a| acc * z + a))
        }
        FormFactorModel::PionPole => {
            let ga = cx
                .models
                .GA
                .as_ref()
                .filter(|m| **m != FormFactorModel::PionPole)?;
            let m_pi = cx.m_pi?;
            let ga = form_factor(ga, q2, cx)?;
            Some(4.0 * cx.mass * cx.mass * ga / (q2 + m_pi * m_pi))
        }
    }
}

/// The conformal variable `z(Q^2; t_cut, t0)` of the z-expansion.
pub fn z_variable(q2: f64, t_cut: f64, t0: f64) -> f64 {
    let a = (t_cut + q2).sqrt();
    let b = (t_cut - t0).sqrt();
    (a - b) / (a + b)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::mock::spec::Positive;
    use approx::assert_relative_eq;

    // Dipole check value of docs/methods.md §6 (common practice): M^2 = 0.71 GeV^2 gives a radius
    // r = sqrt(12 / M^2) = 0.81 fm; here r^2 = -6 G'(0)/G(0) by a central difference.
    #[test]
    fn dipole_radius() {
        let hbarc = 0.1973269804; // GeV fm, CODATA
        let mass = 0.71f64.sqrt() / hbarc; // fm^-1
        let models = FormFactorSpec::default();
        let cx = FormFactorContext {
            mass: 1.0,
            m_pi: None,
            models: &models,
        };
        let m = FormFactorModel::Dipole {
            value_at_zero: 1.0,
            mass: Positive(mass),
        };
        let h = 1e-4;
        let slope =
            (form_factor(&m, h, &cx).unwrap() - form_factor(&m, -h, &cx).unwrap()) / (2.0 * h);
        assert_relative_eq!((-6.0 * slope).sqrt(), 0.811, epsilon = 0.002);
    }

    // z vanishes at Q^2 = -t0 and lies in (-1, 1) for spacelike Q^2 (Hill & Paz 2010).
    #[test]
    fn z_properties() {
        assert_relative_eq!(z_variable(0.3, 0.08, -0.3), 0.0, epsilon = 1e-15);
        for q2 in [0.0, 0.1, 1.0, 100.0] {
            assert!(z_variable(q2, 0.08, 0.0).abs() < 1.0);
        }
        assert_relative_eq!(z_variable(0.0, 0.08, 0.0), 0.0, epsilon = 1e-15);
    }
}

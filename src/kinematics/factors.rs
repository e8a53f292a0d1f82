//! Kinematic coefficients `K` with `Pi(Gamma, O) = sum_k K_k G_k` (docs/methods.md §5).
//!
//! The large-time limit of the three-point/two-point ratio is a trace over the spin
//! projector, the on-shell positive-energy numerators and the vertex of the current:
//!
//! `Pi = Tr[Gamma (-i slash(P_f) + m) J_O (-i slash(P_i) + m)] / (4 sqrt(E_f E_i (E_f + m)(E_i + m)))`.
//!
//! The trace is evaluated numerically with 4x4 complex matrices, once per form factor with
//! that form factor set to one, so every frame, projector and current is covered by the same
//! code. The vector current is traced in the Dirac/Pauli basis (F1, F2) and converted to the
//! Sachs form factors, `G_E = F1 - Q²/(4m²) F2`, `G_M = F1 + F2`.

use super::dirac::{clifford, propagator_numerator, M4};
use super::momentum::{q_squared, OnShell};
use crate::data::{Current, CurrentKind, Projector};
use nalgebra::Complex;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::fmt;

/// The spin of the hadron, which fixes the decomposition.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize, JsonSchema,
)]
#[serde(rename_all = "lowercase")]
pub enum Hadron {
    /// Spin 0 (pion, kaon): one vector form factor `F`.
    Spin0,
    /// Spin 1/2 (nucleon): Sachs, axial, scalar, pseudoscalar and tensor form factors.
    Spin1Half,
}

/// A form factor the decomposition can solve for.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize, JsonSchema,
)]
pub enum FormFactor {
    /// Sachs electric form factor.
    GE,
    /// Sachs magnetic form factor.
    GM,
    /// Axial form factor.
    GA,
    /// Induced pseudoscalar form factor.
    GP,
    /// Scalar form factor.
    GS,
    /// Pseudoscalar form factor.
    G5,
    /// Tensor form factor (forward vertex `sigma_mu_nu g_T`).
    GT,
    /// Spin-0 vector form factor.
    F,
}

impl FormFactor {
    /// The name used in tables and settings (`GE`, `GM`, ...).
    pub fn name(self) -> &'static str {
        match self {
            FormFactor::GE => "GE",
            FormFactor::GM => "GM",
            FormFactor::GA => "GA",
            FormFactor::GP => "GP",
            FormFactor::GS => "GS",
            FormFactor::G5 => "G5",
            FormFactor::GT => "GT",
            FormFactor::F => "F",
        }
    }

    /// The kind of current whose matrix elements carry this form factor.
    pub fn current_kind(self) -> CurrentKind {
        match self {
            FormFactor::GE | FormFactor::GM | FormFactor::F => CurrentKind::Vector,
            FormFactor::GA | FormFactor::GP => CurrentKind::Axial,
            FormFactor::GS => CurrentKind::Scalar,
            FormFactor::G5 => CurrentKind::Pseudoscalar,
            FormFactor::GT => CurrentKind::Tensor,
        }
    }

    /// The form factors a current of `kind` carries for `hadron`, in the order
    /// [`coefficients`] returns them.
    pub fn of(hadron: Hadron, kind: CurrentKind) -> &'static [FormFactor] {
        match (hadron, kind) {
            (Hadron::Spin0, CurrentKind::Vector) => &[FormFactor::F],
            (Hadron::Spin0, _) => &[],
            (Hadron::Spin1Half, CurrentKind::Vector) => &[FormFactor::GE, FormFactor::GM],
            (Hadron::Spin1Half, CurrentKind::Axial) => &[FormFactor::GA, FormFactor::GP],
            (Hadron::Spin1Half, CurrentKind::Scalar) => &[FormFactor::GS],
            (Hadron::Spin1Half, CurrentKind::Pseudoscalar) => &[FormFactor::G5],
            (Hadron::Spin1Half, CurrentKind::Tensor) => &[FormFactor::GT],
        }
    }
}

impl fmt::Display for FormFactor {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

const I: Complex<f64> = Complex::new(0.0, 1.0);

/// Parts of a coefficient smaller than this (relative to the largest coefficient of the
/// channel, or absolute below 1) are rounding noise of the trace and set to exactly zero.
const CLEAN: f64 = 1e-13;

/// The kinematic coefficients `K_k` of `Pi(projector, current) = sum_k K_k G_k` for one channel.
///
/// One entry per form factor of the current's vertex ([`FormFactor::of`]), in that order;
/// coefficients may be zero (e.g. `G_M` in `Pi(Gamma_0, V_4)` with the sink at rest). The list is
/// empty when the combination has no decomposition: a spin-0 hadron with a projector other
/// than `None` or a current other than vector, a spin-1/2 hadron with projector `None`, or a
/// polarised projector with a direction outside 1..=3.
pub fn coefficients(
    hadron: Hadron,
    projector: Projector,
    current: Current,
    k: &OnShell,
) -> Vec<(FormFactor, Complex<f64>)> {
    let mut out = match hadron {
        Hadron::Spin0 => spin0(projector, current, k),
        Hadron::Spin1Half => spin_half(projector, current, k),
    };
    clean_by(&mut out, |(_, c)| c);
    out
}

/// Set the parts of `values` (the coefficients of one channel) below [`CLEAN`] times the
/// largest modulus (or 1) to exactly zero.
pub(super) fn clean(values: &mut [Complex<f64>]) {
    clean_by(values, |c| c);
}

/// [`clean`] of the coefficients `part` finds in `items`.
fn clean_by<T>(items: &mut [T], part: impl Fn(&mut T) -> &mut Complex<f64>) {
    let scale = items
        .iter_mut()
        .map(|t| part(t).norm())
        .fold(1.0_f64, f64::max);
    for t in items {
        let c = part(t);
        if c.re.abs() < CLEAN * scale {
            c.re = 0.0;
        }
        if c.im.abs() < CLEAN * scale {
            c.im = 0.0;
        }
    }
}

/// `Pi(V_mu) = -i (P_f + P_i)_mu F / (2 sqrt(E_f E_i))`.
fn spin0(projector: Projector, current: Current, k: &OnShell) -> Vec<(FormFactor, Complex<f64>)> {
    if projector != Projector::None || current.kind() != CurrentKind::Vector {
        return Vec::new();
    }
    let mu = current.indices()[0];
    let sum = if mu == 4 {
        I * (k.ef + k.ei)
    } else {
        Complex::new(k.pf[mu - 1] + k.pi[mu - 1], 0.0)
    };
    vec![(FormFactor::F, -I * sum / (2.0 * (k.ef * k.ei).sqrt()))]
}

fn four_vector(p: [f64; 3], e: f64) -> [Complex<f64>; 4] {
    [
        Complex::new(p[0], 0.0),
        Complex::new(p[1], 0.0),
        Complex::new(p[2], 0.0),
        Complex::new(0.0, e),
    ]
}

pub(super) fn projector_matrix(projector: Projector) -> Option<M4> {
    let c = clifford();
    let unpol = (M4::identity() + c.g[3]) * Complex::new(0.5, 0.0);
    match projector {
        Projector::Unpol => Some(unpol),
        Projector::Pol(k @ 1..=3) => Some(unpol * c.g5 * c.g[usize::from(k) - 1] * I),
        _ => None,
    }
}

/// The trace's normalisation `4 sqrt(E_f E_i (E_f + m)(E_i + m))` (the module documentation).
pub(super) fn trace_norm(ef: f64, ei: f64, m: f64) -> f64 {
    4.0 * (ef * ei * (ef + m) * (ei + m)).sqrt()
}

/// The coefficients of `(G_E, G_M)` from those of the Dirac and Pauli form factors, `k1` of
/// `F1` and `k2` of `F2`: with `F1 = (G_E + tau G_M)/(1 + tau)`, `F2 = (G_M - G_E)/(1 + tau)`
/// and `tau = Q²/(4m²)`, `Pi = k1 F1 + k2 F2 = (k1 - k2)/(1 + tau) G_E + (k1 tau + k2)/(1 + tau) G_M`.
pub(super) fn sachs(k1: Complex<f64>, k2: Complex<f64>, k: &OnShell) -> [Complex<f64>; 2] {
    let m = k.mass;
    let tau = q_squared(k) / (4.0 * m * m);
    [(k1 - k2) / (1.0 + tau), (k1 * tau + k2) / (1.0 + tau)]
}

/// The factor `-i q_mu / 2m` of the induced pseudoscalar's vertex `gamma_5 (-i q_mu / 2m)`
/// (`two_m` is `2m`, as a real or a complex number).
pub(super) fn pseudoscalar_factor<D>(q_mu: Complex<f64>, two_m: D) -> Complex<f64>
where
    Complex<f64>: std::ops::Div<D, Output = Complex<f64>>,
{
    -I * q_mu / two_m
}

fn spin_half(
    projector: Projector,
    current: Current,
    k: &OnShell,
) -> Vec<(FormFactor, Complex<f64>)> {
    let Some(gamma_proj) = projector_matrix(projector) else {
        return Vec::new();
    };
    let m = k.mass;
    let pf = four_vector(k.pf, k.ef);
    let pi = four_vector(k.pi, k.ei);
    let q: [Complex<f64>; 4] = [0, 1, 2, 3].map(|i| pf[i] - pi[i]);
    let left = gamma_proj * propagator_numerator(&pf, m);
    let right = propagator_numerator(&pi, m);
    let norm = trace_norm(k.ef, k.ei, m);
    let trace = |vertex: M4| (left * vertex * right).trace() / norm;
    let idx = current.indices();
    let two_m = Complex::new(2.0 * m, 0.0);
    let c = clifford();
    match current.kind() {
        CurrentKind::Vector => {
            let mu = idx[0] - 1;
            let f1 = trace(c.g[mu]);
            let sig_q = (0..4).fold(M4::zeros(), |acc, nu| acc + c.sigma[mu][nu] * q[nu]);
            let f2 = trace(-sig_q / two_m);
            let [ge, gm] = sachs(f1, f2, k);
            vec![(FormFactor::GE, ge), (FormFactor::GM, gm)]
        }
        CurrentKind::Axial => {
            let mu = idx[0] - 1;
            vec![
                (FormFactor::GA, trace(c.g[mu] * c.g5)),
                (
                    FormFactor::GP,
                    trace(c.g5 * pseudoscalar_factor(q[mu], two_m)),
                ),
            ]
        }
        CurrentKind::Scalar => vec![(FormFactor::GS, trace(M4::identity()))],
        CurrentKind::Pseudoscalar => vec![(FormFactor::G5, trace(c.g5))],
        CurrentKind::Tensor => vec![(FormFactor::GT, trace(c.sigma[idx[0] - 1][idx[1] - 1]))],
    }
}

//! Effective masses (docs/methods.md §2) as resampled values: the log form
//! `m(t) = ln(C(t)/C(t+1))` and, for a periodic (meson) correlator, the cosh form that solves
//! `C(t)/C(t+1) = cosh(m (t - T/2)) / cosh(m (t + 1 - T/2))` for `m` by a bracketed,
//! safeguarded Newton iteration. Points where the ratio is not positive (or where the cosh
//! equation has no positive solution) are `None`, never NaN.

use crate::resample::Resampled;

/// Which effective mass to compute.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum EffectiveMassKind {
    /// `ln(C(t)/C(t+1))`.
    Log,
    /// Solve the cosh ratio with time extent `T`.
    Cosh {
        /// Time extent `T`.
        t_extent: f64,
    },
}

/// `ln(c0/c1)`, `None` when the ratio is not positive and finite.
pub fn log_mass(c0: f64, c1: f64) -> Option<f64> {
    let r = c0 / c1;
    (r > 0.0 && r.is_finite()).then(|| r.ln())
}

/// `ln cosh(x)` without overflow.
fn ln_cosh(x: f64) -> f64 {
    let a = x.abs();
    a + (-2.0 * a).exp().ln_1p() - std::f64::consts::LN_2
}

/// Solve `c0/c1 = cosh(m (t - T/2)) / cosh(m (t + 1 - T/2))` for `m > 0`. `None` when the ratio
/// is not positive, `t + 1/2 = T/2` (the ratio does not depend on `m`), or no positive
/// solution exists (ratio on the wrong side of 1 for this half of the lattice).
pub fn cosh_mass(c0: f64, c1: f64, t: f64, t_extent: f64) -> Option<f64> {
    let target = log_mass(c0, c1)?;
    let a = t - 0.5 * t_extent;
    let b = t + 1.0 - 0.5 * t_extent;
    let s = a.abs() - b.abs();
    // h is monotone in m > 0 with sign(s); h(0) = -target.
    if s == 0.0 || s * target <= 0.0 {
        return None;
    }
    let h = |m: f64| ln_cosh(m * a) - ln_cosh(m * b) - target;
    let dh = |m: f64| a * (m * a).tanh() - b * (m * b).tanh();
    let (mut lo, mut hi) = (0.0_f64, (target / s).abs().max(1e-3));
    while s * h(hi) < 0.0 {
        lo = hi;
        hi *= 2.0;
        if hi > 1e4 {
            return None;
        }
    }
    let mut m = 0.5 * (lo + hi);
    for _ in 0..200 {
        let hm = h(m);
        if hm == 0.0 {
            return Some(m);
        }
        if s * hm < 0.0 {
            lo = m;
        } else {
            hi = m;
        }
        let d = dh(m);
        let newton = m - hm / d;
        let next = if d != 0.0 && newton > lo && newton < hi {
            newton
        } else {
            0.5 * (lo + hi)
        };
        if (next - m).abs() <= 4.0 * f64::EPSILON * m.abs() || hi - lo <= 4.0 * f64::EPSILON * hi {
            return Some(next);
        }
        m = next;
    }
    Some(m)
}

/// One effective mass from two neighbouring correlator values at time `t`.
pub fn effective_mass_value(kind: EffectiveMassKind, c0: f64, c1: f64, t: f64) -> Option<f64> {
    match kind {
        EffectiveMassKind::Log => log_mass(c0, c1),
        EffectiveMassKind::Cosh { t_extent } => cosh_mass(c0, c1, t, t_extent),
    }
}

/// Effective masses `m(t)`, `t = 0 .. len-2`, of a resampled correlator. A point is `None`
/// when it is undefined on the central value or on any sample.
pub fn effective_mass(corr: &[Resampled], kind: EffectiveMassKind) -> Vec<Option<Resampled>> {
    corr.windows(2)
        .enumerate()
        .map(|(t, w)| {
            let t = t as f64;
            let central = effective_mass_value(kind, w[0].central, w[1].central, t)?;
            let samples = w[0]
                .samples
                .iter()
                .zip(&w[1].samples)
                .map(|(&c0, &c1)| effective_mass_value(kind, c0, c1, t))
                .collect::<Option<Vec<f64>>>()?;
            Some(Resampled::new(central, samples, w[0].scheme))
        })
        .collect()
}

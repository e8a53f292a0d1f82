//! Optimised operators applied to the data: every two- and three-point function projected
//! per configuration with the ground-state eigenvectors of the fixed-vector solution,
//! `C_opt(t) = sum_ab v_a(p) C_ab(t) v_b(p)` and
//! `C3_opt(tsep, tau) = sum_ab v_a(p_f) C3_ab(tsep, tau) v_b(p_i)` (sink operator `a` at
//! momentum `p_f`, source operator `b` at `p_i = p_f - q`).
//!
//! The vectors are those of the full-ensemble average (central values) and are applied to
//! every configuration, so the projected correlators are ordinary per-configuration data and
//! every later stage runs on them unchanged; the ratio is invariant under a rescaling of the
//! sink and the source operator, so the vectors' normalisation drops out of it. Their
//! statistical fluctuation is not propagated into the projected data (a second-order effect
//! at the vectors' optimum, common practice); the vectors' own errors are reported by the
//! GEVP stage.

use crate::data::{Momentum, Operators, Series, ThreePointData, ThreePointKey, TwoPointData};
use crate::error::{Error, Result};
use std::collections::BTreeMap;

/// Ground-state eigenvector (central values, components in basis order) per momentum.
pub type Vectors = BTreeMap<Momentum, Vec<f64>>;

/// Add `weight * s` to `acc`, real and imaginary parts.
fn accumulate(acc: &mut Series, s: &Series, weight: f64) {
    for (a, x) in acc.re.iter_mut().zip(&s.re) {
        *a += weight * x;
    }
    for (a, x) in acc.im.iter_mut().zip(&s.im) {
        *a += weight * x;
    }
}

fn vector<'a>(vectors: &'a Vectors, p: Momentum, what: &str) -> Result<&'a [f64]> {
    vectors.get(&p).map(Vec::as_slice).ok_or_else(|| {
        Error::analysis(
            "gevp",
            format!(
                "{what} needs the optimised operator at momentum ({},{},{}), which has no \
                 two-point correlator matrix",
                p[0], p[1], p[2]
            ),
        )
    })
}

/// The projected two-point functions: one channel per momentum of `vectors` (no smear or
/// operator label).
pub fn project_twopt(
    two: &TwoPointData,
    ops: &[String],
    vectors: &Vectors,
) -> Result<TwoPointData> {
    let matrices = super::basis::twopt_matrices(two, ops)?;
    let n = ops.len();
    let mut channels = BTreeMap::new();
    for (p, matrix) in matrices {
        let v = vector(vectors, p, "the two-point projection")?;
        let mut acc = Series::zeros(matrix[0].n_t, matrix[0].n_cfg);
        for (ij, s) in matrix.iter().enumerate() {
            accumulate(&mut acc, s, v[ij / n] * v[ij % n]);
        }
        let key = crate::data::TwoPointKey {
            momentum: p,
            smear: None,
            ops: None,
        };
        channels.insert(key, acc);
    }
    Ok(TwoPointData {
        configs: two.configs.clone(),
        channels,
    })
}

/// The projected three-point functions: channels that differ only in their operators are
/// combined into one without operator labels. Every sink and source pair of the basis must
/// be present for each such channel.
pub fn project_threept(
    three: &ThreePointData,
    ops: &[String],
    vectors: &Vectors,
) -> Result<ThreePointData> {
    let mut groups: BTreeMap<ThreePointKey, BTreeMap<&Operators, &Series>> = BTreeMap::new();
    for (k, s) in &three.channels {
        if let Some(o) = &k.ops {
            let mut base = k.clone();
            base.ops = None;
            groups.entry(base).or_default().insert(o, s);
        }
    }
    let mut channels = BTreeMap::new();
    for (key, elements) in groups {
        let what = format!(
            "three-point channel tsep={} pf={:?} q={:?} {} {}",
            key.tsep, key.pf, key.q, key.current, key.projector
        );
        let vf = vector(vectors, key.pf, &what)?;
        let vi = vector(vectors, key.source_momentum(), &what)?;
        let mut acc: Option<Series> = None;
        for (a, wa) in ops.iter().zip(vf) {
            for (b, wb) in ops.iter().zip(vi) {
                let s = elements.get(&Operators::new(a, b)).ok_or_else(|| {
                    Error::analysis(
                        "gevp",
                        format!(
                            "{what} lacks sink_op `{a}`, source_op `{b}`: projecting onto the \
                             optimised operators needs every pair of the basis {ops:?}"
                        ),
                    )
                })?;
                let acc = acc.get_or_insert_with(|| Series::zeros(s.n_t, s.n_cfg));
                accumulate(acc, s, wa * wb);
            }
        }
        if let Some(acc) = acc {
            channels.insert(key, acc);
        }
    }
    Ok(ThreePointData {
        configs: three.configs.clone(),
        channels,
    })
}

//! Joint two-state fit of the ratio and the two-point functions (docs/methods.md §4, "the stronger
//! variant"): the two-point functions at the source and sink momenta,
//! `C2(t) = A_0 e^{-E_0 t} (1 + a e^{-Delta t})` for `t_min <= t <= t_max`, are fitted together
//! with the ratio of [`super::fixed`], sharing `a` and `Delta` per momentum, so the
//! two-point information and its correlation with the ratio enter one chi-square. Parameters:
//! the linear ones per fitted part, then `(A_0, E_0, a, Delta)` at the source and (unless
//! `p_f = p_i`) at the sink. No priors; starting values are the fixed-gap solution and the
//! two-point stage's `E_0`, `a`, `Delta`, with `A_0` matched at `t_min`.

use super::fixed::{Gaps, TwoPointStates, TwoStateFit};
use super::floating::{at, ratio_point, solver_settings, Frame};
use crate::data::Momentum;
use crate::fit::{nonlinear, Model};
use crate::ratio::lsq::weights;
use crate::ratio::{ChannelRatio, RatioSettings, STAGE};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;
use std::collections::BTreeMap;

/// Ratio points and two-point time slices fitted jointly.
pub(crate) struct JointModel {
    /// `(tsep, tau)` of each ratio point; stacked once per fitted part.
    pub times: Vec<(f64, f64)>,
    /// Number of fitted ratio parts.
    pub parts: usize,
    /// `c_i = c_f` enforced.
    pub symmetric: bool,
    /// `p_f = p_i`: one two-point function serves both sides.
    pub shared: bool,
    /// Two-point time slices, after the ratio points (source first, then sink unless shared).
    pub c2_times: Vec<f64>,
}

impl JointModel {
    fn n_linear(&self) -> usize {
        if self.symmetric {
            3
        } else {
            4
        }
    }

    fn n_sides(&self) -> usize {
        if self.shared {
            1
        } else {
            2
        }
    }

    /// Index of the first two-point parameter of side `side` (0 source, 1 sink).
    fn side_offset(&self, side: usize) -> usize {
        self.parts * self.n_linear() + 4 * side.min(self.n_sides() - 1)
    }

    fn gaps(&self, p: &[f64]) -> Gaps {
        let (i, f) = (self.side_offset(0), self.side_offset(1));
        Gaps {
            a_i: p[i + 2],
            d_i: p[i + 3],
            a_f: p[f + 2],
            d_f: p[f + 3],
        }
    }
}

/// `A e^{-E t} (1 + a e^{-D t})` and its derivatives with respect to `(A, E, a, D)`.
fn two_point(p: &[f64], t: f64) -> (f64, [f64; 4]) {
    let (amp, e, a, d) = (p[0], p[1], p[2], p[3]);
    let g = (-e * t).exp();
    let x = (-d * t).exp();
    let value = amp * g * (1.0 + a * x);
    (
        value,
        [
            g * (1.0 + a * x),
            -t * value,
            amp * g * x,
            -t * amp * g * a * x,
        ],
    )
}

impl Model for JointModel {
    fn n_params(&self) -> usize {
        self.parts * self.n_linear() + 4 * self.n_sides()
    }

    fn n_points(&self) -> usize {
        self.parts * self.times.len() + self.n_sides() * self.c2_times.len()
    }

    fn eval(&self, params: &[f64], out: &mut [f64]) {
        let g = self.gaps(params);
        let (k, n) = (self.n_linear(), self.times.len());
        for part in 0..self.parts {
            let lin = &params[part * k..(part + 1) * k];
            for (row, &(tsep, tau)) in self.times.iter().enumerate() {
                out[part * n + row] = ratio_point(self.symmetric, lin, g, tsep, tau).value;
            }
        }
        let base = self.parts * n;
        let m = self.c2_times.len();
        for side in 0..self.n_sides() {
            let o = self.side_offset(side);
            for (row, &t) in self.c2_times.iter().enumerate() {
                out[base + side * m + row] = two_point(&params[o..o + 4], t).0;
            }
        }
    }

    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>) {
        let g = self.gaps(params);
        let (k, n) = (self.n_linear(), self.times.len());
        let (oi, of) = (self.side_offset(0), self.side_offset(1));
        out.fill(0.0);
        for part in 0..self.parts {
            let lin = &params[part * k..(part + 1) * k];
            for (row, &(tsep, tau)) in self.times.iter().enumerate() {
                let r = part * n + row;
                let d = ratio_point(self.symmetric, lin, g, tsep, tau);
                for (j, b) in d.basis.iter().take(k).enumerate() {
                    out[(r, part * k + j)] = *b;
                }
                // `+=` so that a shared side collects both contributions.
                out[(r, oi + 2)] += d.d_amp_i;
                out[(r, oi + 3)] += d.d_gap_i;
                out[(r, of + 2)] += d.d_amp_f;
                out[(r, of + 3)] += d.d_gap_f;
            }
        }
        let base = self.parts * n;
        let m = self.c2_times.len();
        for side in 0..self.n_sides() {
            let o = self.side_offset(side);
            for (row, &t) in self.c2_times.iter().enumerate() {
                let (_, d) = two_point(&params[o..o + 4], t);
                for (j, v) in d.iter().enumerate() {
                    out[(base + side * m + row, o + j)] = *v;
                }
            }
        }
    }
}

/// Joint fit of `ratio` and its two-point functions over `t_min..=t_max`.
pub fn two_state_joint(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    t_min: u32,
    t_max: u32,
) -> Result<TwoStateFit> {
    let frame = match Frame::new(ratio, states, settings, "joint two-state fit with C2")? {
        Ok(frame) => frame,
        Err(zero) => return Ok(zero),
    };
    let what = frame.what.clone();
    let shared = ratio.key.pf == ratio.key.source_momentum();
    let n_t = ratio.c2_source.len().min(ratio.c2_sink.len());
    if t_min >= t_max || t_max as usize >= n_t {
        return Err(Error::analysis(
            STAGE,
            format!(
                "{what}: two-point window t = {t_min}..={t_max}; expected t_min < t_max < {n_t} \
                 (the two-point time extent)"
            ),
        ));
    }
    let window = t_min as usize..=t_max as usize;
    let mut stacked = frame.stacked.clone();
    stacked.extend(ratio.c2_source[window.clone()].iter().cloned());
    if !shared {
        stacked.extend(ratio.c2_sink[window.clone()].iter().cloned());
    }
    let (w, warnings) = weights(&stacked, ratio.covariance(settings), &what)?;
    let setup = &frame.setup;
    let model = JointModel {
        times: setup
            .points
            .iter()
            .map(|p| (p.tsep as f64, p.tau as f64))
            .collect(),
        parts: frame.parts(),
        symmetric: setup.symmetric,
        shared,
        c2_times: window.map(|t| t as f64).collect(),
    };
    let t0 = t_min as usize;
    let side_start = |st: &TwoPointStates, c2: &[Resampled], s: Option<usize>| {
        let (e, a, d) = (at(&st.energy, s), at(&st.amp_ratio, s), at(&st.gap, s));
        let t = t0 as f64;
        let amp = at(&c2[t0], s) * (e * t).exp() / (1.0 + a * (-d * t).exp());
        [amp, e, a, d]
    };
    let results = frame.run(|s| {
        let mut start = frame.linear_start(s);
        start.extend(side_start(setup.source, &ratio.c2_source, s));
        if !shared {
            start.extend(side_start(setup.sink, &ratio.c2_sink, s));
        }
        let y: Vec<f64> = stacked.iter().map(|v| at(v, s)).collect();
        nonlinear::fit(&model, &y, &w, &[], &start, &solver_settings())
    })?;
    let gap_index = (model.side_offset(0) + 3, model.side_offset(1) + 3);
    let amp_index = (model.side_offset(0) + 2, model.side_offset(1) + 2);
    Ok(frame.assemble(&results, gap_index, Some(amp_index), warnings))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ratio::two_state::jacobian_check::assert_jacobian_matches;

    #[test]
    fn jacobian_matches_finite_differences() {
        for (shared, symmetric, parts) in [(false, false, 2), (true, true, 1), (true, false, 2)] {
            let model = JointModel {
                times: vec![(6.0, 1.0), (6.0, 3.0), (8.0, 2.0), (8.0, 5.0), (8.0, 7.0)],
                parts,
                symmetric,
                shared,
                c2_times: vec![2.0, 3.0, 5.0],
            };
            let k = model.n_linear();
            let mut p: Vec<f64> = (0..parts * k).map(|j| 0.3 + 0.1 * j as f64).collect();
            p.extend([2.0, 0.45, 0.7, 0.38]);
            if !shared {
                p.extend([1.5, 0.55, 0.6, 0.42]);
            }
            assert_jacobian_matches(&model, &p);
        }
    }
}

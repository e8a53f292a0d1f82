//! Two-state fit of the ratio with floating gaps (methods.md §4, the non-linear variant).
//!
//! The model is that of [`super::two_state`], with the gaps `Delta_i`, `Delta_f` as
//! parameters constrained by Gaussian priors ("constrained curve fitting", Lepage et al.,
//! Nucl. Phys. Proc. Suppl. 106 (2002) 12). The real and imaginary parts are fitted jointly
//! with shared gaps: parameters `(M, c_i, c_f, c_if)` per part, then the gaps; `c_f` is
//! dropped when `c_i = c_f` is enforced, and one gap serves both sides when `p_f = p_i`. The
//! amplitude ratios `a` in `F2` stay fixed per resample. Per resample, the prior centre is the
//! two-point gap of that resample (so its fluctuation propagates) and the width is the
//! two-point error times `prior_width_factor`. Real and imaginary parts being fitted jointly,
//! the reported fit quality (chi-square including the prior terms) is that of the joint fit,
//! given for both parts.

use super::lsq::weights;
use super::two_state::{f2, two_state_fixed, FittedGaps, Gaps, Setup, TwoPointStates, TwoStateFit};
use super::{ChannelRatio, FitQuality, RatioSettings, ReIm, ReImFit, STAGE};
use crate::data::Momentum;
use crate::fit::{nonlinear, FitSettings, Model, Prior};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;
use std::collections::BTreeMap;

/// Two-state fit of `ratio` with floating gaps (priors of width `width_factor` times the
/// two-point errors). The starting values of each resample are that resample's fixed-gap
/// solution.
pub fn two_state_floating(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    width_factor: f64,
) -> Result<TwoStateFit> {
    let fixed = two_state_fixed(ratio, states, settings)?;
    let setup = Setup::new(ratio, states, settings)?;
    let what = format!("two-state fit with floating gaps of channel {}", ratio.key);
    let is_zero = |v: &Resampled| v.central == 0.0 && v.samples.iter().all(|&x| x == 0.0);
    let re: Vec<Resampled> = setup.points.iter().map(|p| p.value.re.clone()).collect();
    let im: Vec<Resampled> = setup.points.iter().map(|p| p.value.im.clone()).collect();
    // Parts that carry data (an exactly zero part stays exactly zero).
    let fit_re = !re.iter().all(is_zero);
    let fit_im = !im.iter().all(is_zero);
    let mut stacked = Vec::new();
    if fit_re {
        stacked.extend(re);
    }
    if fit_im {
        stacked.extend(im);
    }
    let parts = usize::from(fit_re) + usize::from(fit_im);
    if parts == 0 {
        return Ok(fixed);
    }
    let (w, warnings) = weights(&stacked, ratio.covariance(settings), &what)?;
    let shared_gap = ratio.key.pf == ratio.key.pi();
    let mut model = FloatingGapModel {
        times: setup
            .points
            .iter()
            .map(|p| (p.tsep as f64, p.tau as f64))
            .collect(),
        parts,
        symmetric: setup.symmetric,
        shared_gap,
        a_i: 0.0,
        a_f: 0.0,
    };
    let k = model.n_linear();
    let gap_states: Vec<&Resampled> = if shared_gap {
        vec![&setup.source.gap]
    } else {
        vec![&setup.source.gap, &setup.sink.gap]
    };
    let widths: Vec<f64> = gap_states
        .iter()
        .map(|g| g.error() * width_factor)
        .collect();
    if widths.iter().any(|w| !(w.is_finite() && *w > 0.0)) {
        return Err(Error::analysis(
            STAGE,
            format!(
                "{what}: the two-point gap has no error (or prior_width_factor {width_factor} is                  not positive), so no prior width follows; use fixed gaps instead"
            ),
        ));
    }
    // Linear parameters of one part of the fixed-gap solution at resample `s`.
    let at = |r: &Resampled, s: Option<usize>| s.map_or(r.central, |j| r.samples[j]);
    let lin_start = |part: &dyn Fn(&ReIm) -> &Resampled, s: Option<usize>| {
        let mut v = vec![at(part(&fixed.m.value), s), at(part(&fixed.c_i), s)];
        if !setup.symmetric {
            v.push(at(part(&fixed.c_f), s));
        }
        v.push(at(part(&fixed.c_if), s));
        v
    };
    let n_samples = stacked[0].len();
    let mut results = Vec::with_capacity(n_samples + 1);
    for s in std::iter::once(None).chain((0..n_samples).map(Some)) {
        let g = setup.gaps(s);
        model.a_i = g.a_i;
        model.a_f = g.a_f;
        let mut start = Vec::with_capacity(model.n_params());
        if fit_re {
            start.extend(lin_start(&|x: &ReIm| &x.re, s));
        }
        if fit_im {
            start.extend(lin_start(&|x: &ReIm| &x.im, s));
        }
        let mut priors = vec![None; start.len()];
        for (gap, width) in gap_states.iter().zip(&widths) {
            let centre = at(gap, s);
            start.push(centre);
            priors.push(Some(Prior::new(centre, *width)));
        }
        let y: Vec<f64> = stacked.iter().map(|v| at(v, s)).collect();
        let report = nonlinear::fit(&model, &y, &w, &priors, &start, &FitSettings::default());
        if !report.converged {
            return Err(Error::analysis(
                STAGE,
                format!(
                    "{what}: the fit did not converge on {} ({})",
                    s.map_or("the central value".to_string(), |j| format!("resample {j}")),
                    report.message
                ),
            ));
        }
        results.push(report);
    }
    let scheme = stacked[0].scheme;
    let param = |j: usize| {
        Resampled::new(
            results[0].params[j],
            results[1..].iter().map(|r| r.params[j]).collect(),
            scheme,
        )
    };
    let zero = || fixed.m.value.re.map(|_| 0.0);
    let mut offset = 0;
    let mut take_part = |fitted: bool| -> Vec<Resampled> {
        if fitted {
            let v = (offset..offset + k).map(param).collect();
            offset += k;
            v
        } else {
            vec![zero(); k]
        }
    };
    let re = take_part(fit_re);
    let im = take_part(fit_im);
    let pair = |j: usize| ReIm {
        re: re[j].clone(),
        im: im[j].clone(),
    };
    let gap_i = param(parts * k);
    let gap_f = if shared_gap {
        gap_i.clone()
    } else {
        param(parts * k + 1)
    };
    let quality = FitQuality {
        chi2: results[0].chi2,
        dof: results[0].dof,
        p_value: results[0].p_value,
    };
    Ok(TwoStateFit {
        m: ReImFit {
            value: pair(0),
            quality_re: quality,
            quality_im: quality,
            warnings,
        },
        c_i: pair(1),
        c_f: if setup.symmetric { pair(1) } else { pair(2) },
        c_if: pair(k - 1),
        symmetric: setup.symmetric,
        tseps: setup.tseps,
        n_points: setup.points.len(),
        gaps: Some(FittedGaps {
            source: gap_i,
            sink: gap_f,
        }),
    })
}

/// The ratio model with floating gaps for a fixed set of `(tsep, tau)` points.
pub(crate) struct FloatingGapModel {
    /// `(tsep, tau)` of each point; the data are stacked once per fitted part.
    pub times: Vec<(f64, f64)>,
    /// Number of parts fitted (1: real or imaginary only, 2: both, real first).
    pub parts: usize,
    /// `c_i = c_f` enforced.
    pub symmetric: bool,
    /// One gap for both sides (`p_f = p_i`).
    pub shared_gap: bool,
    /// Amplitude ratio at the source momentum.
    pub a_i: f64,
    /// Amplitude ratio at the sink momentum.
    pub a_f: f64,
}

impl FloatingGapModel {
    /// Linear parameters per part.
    pub fn n_linear(&self) -> usize {
        if self.symmetric {
            3
        } else {
            4
        }
    }

    /// Number of gap parameters.
    pub fn n_gaps(&self) -> usize {
        if self.shared_gap {
            1
        } else {
            2
        }
    }

    /// `(Delta_i, Delta_f)` from the parameter vector.
    pub fn gaps_of(&self, params: &[f64]) -> (f64, f64) {
        let g = self.parts * self.n_linear();
        if self.shared_gap {
            (params[g], params[g])
        } else {
            (params[g], params[g + 1])
        }
    }

    /// Value of one part at one point, and its derivatives with respect to the linear
    /// parameters (`lin`) and to `Delta_i`, `Delta_f`.
    fn point(
        &self,
        lin: &[f64],
        d_i: f64,
        d_f: f64,
        tsep: f64,
        tau: f64,
    ) -> (f64, [f64; 4], f64, f64) {
        let g = Gaps {
            a_i: self.a_i,
            d_i,
            a_f: self.a_f,
            d_f,
        };
        let f = f2(tsep, tau, g);
        let ei = (-d_i * tau).exp();
        let ef = (-d_f * (tsep - tau)).exp();
        let basis: [f64; 4] = if self.symmetric {
            [f, f * (ei + ef), f * ei * ef, 0.0]
        } else {
            [f, f * ei, f * ef, f * ei * ef]
        };
        let (m, ci, cf, cif) = if self.symmetric {
            (lin[0], lin[1], lin[1], lin[2])
        } else {
            (lin[0], lin[1], lin[2], lin[3])
        };
        let inner = m + ci * ei + cf * ef + cif * ei * ef;
        // d ln(1 + a e^{-D s}) / dD = -s a e^{-D s} / (1 + a e^{-D s}).
        let dl = |a: f64, d: f64, s: f64| {
            let x = a * (-d * s).exp();
            -s * x / (1.0 + x)
        };
        // ln F2 = [L_i(T-tau) - L_i(tau) - L_i(T) + L_f(tau) + L_f(T) - L_f(T-tau)] / 2 - L_f(T).
        let dlog_i = 0.5
            * (dl(self.a_i, d_i, tsep - tau) - dl(self.a_i, d_i, tau) - dl(self.a_i, d_i, tsep));
        let dlog_f = 0.5
            * (dl(self.a_f, d_f, tau) + dl(self.a_f, d_f, tsep) - dl(self.a_f, d_f, tsep - tau))
            - dl(self.a_f, d_f, tsep);
        let value = f * inner;
        let dd_i = value * dlog_i + f * (-tau) * ei * (ci + cif * ef);
        let dd_f = value * dlog_f + f * (-(tsep - tau)) * ef * (cf + cif * ei);
        (value, basis, dd_i, dd_f)
    }
}

impl Model for FloatingGapModel {
    fn n_params(&self) -> usize {
        self.parts * self.n_linear() + self.n_gaps()
    }

    fn n_points(&self) -> usize {
        self.parts * self.times.len()
    }

    fn eval(&self, params: &[f64], out: &mut [f64]) {
        let (d_i, d_f) = self.gaps_of(params);
        let k = self.n_linear();
        let n = self.times.len();
        for part in 0..self.parts {
            let lin = &params[part * k..(part + 1) * k];
            for (row, &(tsep, tau)) in self.times.iter().enumerate() {
                out[part * n + row] = self.point(lin, d_i, d_f, tsep, tau).0;
            }
        }
    }

    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>) {
        let (d_i, d_f) = self.gaps_of(params);
        let k = self.n_linear();
        let n = self.times.len();
        let g = self.parts * k;
        out.fill(0.0);
        for part in 0..self.parts {
            let lin = &params[part * k..(part + 1) * k];
            for (row, &(tsep, tau)) in self.times.iter().enumerate() {
                let r = part * n + row;
                let (_, basis, dd_i, dd_f) = self.point(lin, d_i, d_f, tsep, tau);
                for (j, b) in basis.iter().take(k).enumerate() {
                    out[(r, part * k + j)] = *b;
                }
                if self.shared_gap {
                    out[(r, g)] = dd_i + dd_f;
                } else {
                    out[(r, g)] = dd_i;
                    out[(r, g + 1)] = dd_f;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn check_jacobian(model: &FloatingGapModel, params: &[f64]) {
        // Analytic Jacobian against central finite differences (step 1e-6; common practice).
        let (n, k) = (model.n_points(), model.n_params());
        let mut jac = DMatrix::zeros(n, k);
        model.jacobian(params, &mut jac);
        let (mut up, mut down) = (vec![0.0; n], vec![0.0; n]);
        for j in 0..k {
            let h = 1e-6;
            let mut p = params.to_vec();
            p[j] += h;
            model.eval(&p, &mut up);
            p[j] -= 2.0 * h;
            model.eval(&p, &mut down);
            for i in 0..n {
                let fd = (up[i] - down[i]) / (2.0 * h);
                assert_relative_eq!(jac[(i, j)], fd, epsilon = 1e-7, max_relative = 1e-6);
            }
        }
    }

    fn times() -> Vec<(f64, f64)> {
        [
            (6.0, 1.0),
            (6.0, 3.0),
            (6.0, 5.0),
            (9.0, 2.0),
            (9.0, 4.0),
            (9.0, 7.0),
        ]
        .to_vec()
    }

    #[test]
    fn jacobian_matches_finite_differences_general() {
        let model = FloatingGapModel {
            times: times(),
            parts: 2,
            symmetric: false,
            shared_gap: false,
            a_i: 0.6,
            a_f: 0.8,
        };
        let params = [0.9, 0.3, 0.2, 0.1, -0.4, -0.1, 0.05, 0.02, 0.42, 0.37];
        check_jacobian(&model, &params);
    }

    #[test]
    fn jacobian_matches_finite_differences_symmetric_shared_gap() {
        let model = FloatingGapModel {
            times: times(),
            parts: 1,
            symmetric: true,
            shared_gap: true,
            a_i: 0.7,
            a_f: 0.7,
        };
        check_jacobian(&model, &[1.1, 0.4, 0.2, 0.5]);
    }
}

//! Two-state fit of the ratio with floating gaps (docs/methods.md §4, the non-linear variant).
//!
//! The model is that of [`super::fixed`], with the gaps `Delta_i`, `Delta_f` as
//! parameters constrained by Gaussian priors ("constrained curve fitting", Lepage et al.,
//! Nucl. Phys. Proc. Suppl. 106 (2002) 12). The real and imaginary parts are fitted jointly
//! with shared gaps: parameters `(M, c_i, c_f, c_if)` per part, then the gaps; `c_f` is
//! dropped when `c_i = c_f` is enforced, and one gap serves both sides when `p_f = p_i`. The
//! amplitude ratios `a` in `F2` stay fixed per resample. Per resample, the prior centre is the
//! two-point gap of that resample (so its fluctuation propagates) and the width is the
//! two-point error times `prior_width_factor`. Real and imaginary parts being fitted jointly,
//! the reported fit quality (chi-square including the prior terms) is that of the joint fit,
//! given for both parts.

use super::fixed::{f2, two_state_fixed, FittedGaps, Gaps, Setup, TwoPointStates, TwoStateFit};
use crate::data::Momentum;
use crate::fit::{nonlinear, FitReport, FitSettings, Model, Prior};
use crate::ratio::lsq::weights;
use crate::ratio::{ChannelRatio, FitQuality, RatioSettings, ReIm, ReImFit, STAGE};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;
use std::collections::BTreeMap;

/// What the non-linear two-state variants share: the fitted points, the fixed-gap solution
/// (starting values), which parts carry data, and the assembly of the result.
pub(crate) struct Frame<'a> {
    /// Points and two-point inputs.
    pub setup: Setup<'a>,
    /// The fixed-gap solution, per resample.
    pub fixed: TwoStateFit,
    /// Whether the real / imaginary part is fitted (an exactly zero part stays zero).
    pub fit_re: bool,
    /// See `fit_re`.
    pub fit_im: bool,
    /// The fitted ratio points, real part first, then imaginary part.
    pub stacked: Vec<Resampled>,
    /// Description for error messages.
    pub what: String,
}

/// Solver settings of the non-linear variants: tolerances of `1e-12` (far below any
/// statistical error, and well above the solver's machine-precision defaults, which cost many
/// iterations on noisy data without changing a result).
pub(crate) fn solver_settings() -> FitSettings {
    FitSettings {
        ftol: 1e-12,
        xtol: 1e-12,
        gtol: 1e-12,
        ..FitSettings::default()
    }
}

/// The value of `r` at resample `s` (`None` = central).
pub(crate) fn at(r: &Resampled, s: Option<usize>) -> f64 {
    s.map_or(r.central, |j| r.samples[j])
}

impl<'a> Frame<'a> {
    /// The frame of `ratio`; `None` when neither part carries data (then the fixed-gap
    /// solution, exactly zero, is the answer).
    pub fn new(
        ratio: &'a ChannelRatio,
        states: &'a BTreeMap<Momentum, TwoPointStates>,
        settings: &RatioSettings,
        label: &str,
    ) -> Result<std::result::Result<Frame<'a>, TwoStateFit>> {
        let fixed = two_state_fixed(ratio, states, settings)?;
        let setup = Setup::new(ratio, states, settings)?;
        let is_zero = |v: &Resampled| v.central == 0.0 && v.samples.iter().all(|&x| x == 0.0);
        let re: Vec<Resampled> = setup.points.iter().map(|p| p.value.re.clone()).collect();
        let im: Vec<Resampled> = setup.points.iter().map(|p| p.value.im.clone()).collect();
        let fit_re = !re.iter().all(is_zero);
        let fit_im = !im.iter().all(is_zero);
        if !fit_re && !fit_im {
            return Ok(Err(fixed));
        }
        let mut stacked = Vec::new();
        if fit_re {
            stacked.extend(re);
        }
        if fit_im {
            stacked.extend(im);
        }
        Ok(Ok(Frame {
            setup,
            fixed,
            fit_re,
            fit_im,
            stacked,
            what: format!("{label} of channel {}", ratio.key),
        }))
    }

    /// Number of fitted parts.
    pub fn parts(&self) -> usize {
        usize::from(self.fit_re) + usize::from(self.fit_im)
    }

    /// Linear parameters per part.
    pub fn n_linear(&self) -> usize {
        if self.setup.symmetric {
            3
        } else {
            4
        }
    }

    /// Starting values of the linear parameters of every fitted part at resample `s`: the
    /// fixed-gap solution.
    pub fn linear_start(&self, s: Option<usize>) -> Vec<f64> {
        let mut v = Vec::new();
        let f = &self.fixed;
        let mut push = |part: fn(&ReIm) -> &Resampled| {
            v.push(at(part(&f.m.value), s));
            v.push(at(part(&f.c_i), s));
            if !self.setup.symmetric {
                v.push(at(part(&f.c_f), s));
            }
            v.push(at(part(&f.c_if), s));
        };
        if self.fit_re {
            push(|x| &x.re);
        }
        if self.fit_im {
            push(|x| &x.im);
        }
        v
    }

    /// Run `fit` on the central value and every resample; a fit that does not converge is an
    /// error naming the resample.
    pub fn run(&self, fit: impl Fn(Option<usize>) -> FitReport) -> Result<Vec<FitReport>> {
        // safe: `Frame::new` returns a frame only when some part is fitted (non-empty).
        let n_samples = self.stacked[0].len();
        std::iter::once(None)
            .chain((0..n_samples).map(Some))
            .map(|s| {
                let report = fit(s);
                if report.converged {
                    Ok(report)
                } else {
                    Err(Error::analysis(
                        STAGE,
                        format!(
                            "{}: the fit did not converge on {} ({})",
                            self.what,
                            s.map_or("the central value".to_string(), |j| format!("resample {j}")),
                            report.message
                        ),
                    ))
                }
            })
            .collect()
    }

    /// The result from the per-resample reports (`results[0]` central); the gaps are the
    /// parameters at `gap_index = (source, sink)`, the amplitude ratios those at
    /// `amp_index` when they were fitted too (else the two-point stage's).
    pub fn assemble(
        self,
        results: &[FitReport],
        gap_index: (usize, usize),
        amp_index: Option<(usize, usize)>,
        warnings: Vec<String>,
    ) -> TwoStateFit {
        let central = &results[0].params;
        let mut shape = self.setup.gaps(None);
        shape.d_i = central[gap_index.0];
        shape.d_f = central[gap_index.1];
        if let Some((i, f)) = amp_index {
            shape.a_i = central[i];
            shape.a_f = central[f];
        }
        // safe: `stacked` is non-empty (see `run`), `results` starts with the central fit.
        let scheme = self.stacked[0].scheme;
        let param = |j: usize| {
            Resampled::new(
                results[0].params[j],
                results[1..].iter().map(|r| r.params[j]).collect(),
                scheme,
            )
        };
        let k = self.n_linear();
        let zero = self.fixed.m.value.re.map(|_| 0.0);
        let mut offset = 0;
        let mut take_part = |fitted: bool| -> Vec<Resampled> {
            if fitted {
                let v = (offset..offset + k).map(param).collect();
                offset += k;
                v
            } else {
                vec![zero.clone(); k]
            }
        };
        let re = take_part(self.fit_re);
        let im = take_part(self.fit_im);
        let pair = |j: usize| ReIm {
            re: re[j].clone(),
            im: im[j].clone(),
        };
        let quality = FitQuality {
            chi2: results[0].chi2,
            dof: results[0].dof,
            p_value: results[0].p_value,
        };
        let symmetric = self.setup.symmetric;
        TwoStateFit {
            m: ReImFit {
                value: pair(0),
                quality_re: quality,
                quality_im: quality,
                warnings,
            },
            c_i: pair(1),
            c_f: if symmetric { pair(1) } else { pair(2) },
            c_if: pair(k - 1),
            symmetric,
            tseps: self.setup.tseps,
            n_points: self.setup.points.len(),
            gaps: Some(FittedGaps {
                source: param(gap_index.0),
                sink: param(gap_index.1),
            }),
            shape,
        }
    }
}

/// Two-state fit of `ratio` with floating gaps (priors of width `width_factor` times the
/// two-point errors). The starting values of each resample are that resample's fixed-gap
/// solution.
pub fn two_state_floating(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    width_factor: f64,
) -> Result<TwoStateFit> {
    let frame = match Frame::new(ratio, states, settings, "two-state fit with floating gaps")? {
        Ok(frame) => frame,
        Err(zero) => return Ok(zero),
    };
    let what = frame.what.clone();
    let (w, warnings) = weights(&frame.stacked, ratio.covariance(settings), &what)?;
    let shared_gap = ratio.key.pf == ratio.key.source_momentum();
    let setup = &frame.setup;
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
                "{what}: the two-point gap has no error (or prior_width_factor {width_factor} is \
                 not positive), so no prior width follows; use fixed gaps instead"
            ),
        ));
    }
    let times: Vec<(f64, f64)> = setup
        .points
        .iter()
        .map(|p| (p.tsep as f64, p.tau as f64))
        .collect();
    let results = frame.run(|s| {
        let g = setup.gaps(s);
        let model = FloatingGapModel {
            times: times.clone(),
            parts: frame.parts(),
            symmetric: setup.symmetric,
            shared_gap,
            a_i: g.a_i,
            a_f: g.a_f,
        };
        let mut start = frame.linear_start(s);
        let mut priors = vec![None; start.len()];
        for (gap, width) in gap_states.iter().zip(&widths) {
            let centre = at(gap, s);
            start.push(centre);
            priors.push(Some(Prior::new(centre, *width)));
        }
        let y: Vec<f64> = frame.stacked.iter().map(|v| at(v, s)).collect();
        nonlinear::fit(&model, &y, &w, &priors, &start, &solver_settings())
    })?;
    let g = frame.parts() * frame.n_linear();
    let gap_index = if shared_gap { (g, g) } else { (g, g + 1) };
    Ok(frame.assemble(&results, gap_index, None, warnings))
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
}

/// The ratio model of one part at one point with its derivatives.
pub(crate) struct PointDerivs {
    /// Model value.
    pub value: f64,
    /// Derivatives with respect to the linear parameters (`(M, c_i, c_f, c_if)`, or
    /// `(M, c, c_if, 0)` when symmetric).
    pub basis: [f64; 4],
    /// Derivative with respect to `Delta_i`.
    pub d_gap_i: f64,
    /// Derivative with respect to `Delta_f`.
    pub d_gap_f: f64,
    /// Derivative with respect to `a_i`.
    pub d_amp_i: f64,
    /// Derivative with respect to `a_f`.
    pub d_amp_f: f64,
}

/// The two-state ratio `F2 (M + c_i e_i + c_f e_f + c_if e_i e_f)` at `(tsep, tau)` for linear
/// parameters `lin` and two-point parameters `g`, with its analytic derivatives. With
/// `L(s) = ln(1 + a e^{-D s})`, `ln F2 = [L_i(T-tau) - L_i(tau) - L_i(T) + L_f(tau) + L_f(T)
/// - L_f(T-tau)] / 2 - L_f(T)`, `dL/dD = -s a e^{-D s} / (1 + a e^{-D s})` and
/// `dL/da = e^{-D s} / (1 + a e^{-D s})`.
pub(crate) fn ratio_point(
    symmetric: bool,
    lin: &[f64],
    g: Gaps,
    tsep: f64,
    tau: f64,
) -> PointDerivs {
    let f = f2(tsep, tau, g);
    let ei = (-g.d_i * tau).exp();
    let ef = (-g.d_f * (tsep - tau)).exp();
    let basis: [f64; 4] = if symmetric {
        [f, f * (ei + ef), f * ei * ef, 0.0]
    } else {
        [f, f * ei, f * ef, f * ei * ef]
    };
    let (m, ci, cf, cif) = if symmetric {
        (lin[0], lin[1], lin[1], lin[2])
    } else {
        (lin[0], lin[1], lin[2], lin[3])
    };
    let inner = m + ci * ei + cf * ef + cif * ei * ef;
    let dl_dd = |a: f64, d: f64, s: f64| {
        let x = a * (-d * s).exp();
        -s * x / (1.0 + x)
    };
    let dl_da = |a: f64, d: f64, s: f64| {
        let e = (-d * s).exp();
        e / (1.0 + a * e)
    };
    let side_i = |dl: &dyn Fn(f64, f64, f64) -> f64| {
        0.5 * (dl(g.a_i, g.d_i, tsep - tau) - dl(g.a_i, g.d_i, tau) - dl(g.a_i, g.d_i, tsep))
    };
    let side_f = |dl: &dyn Fn(f64, f64, f64) -> f64| {
        0.5 * (dl(g.a_f, g.d_f, tau) + dl(g.a_f, g.d_f, tsep) - dl(g.a_f, g.d_f, tsep - tau))
            - dl(g.a_f, g.d_f, tsep)
    };
    let value = f * inner;
    PointDerivs {
        value,
        basis,
        d_gap_i: value * side_i(&dl_dd) + f * (-tau) * ei * (ci + cif * ef),
        d_gap_f: value * side_f(&dl_dd) + f * (-(tsep - tau)) * ef * (cf + cif * ei),
        d_amp_i: value * side_i(&dl_da),
        d_amp_f: value * side_f(&dl_da),
    }
}

impl FloatingGapModel {
    fn gaps_at(&self, params: &[f64]) -> Gaps {
        let (d_i, d_f) = self.gaps_of(params);
        Gaps {
            a_i: self.a_i,
            d_i,
            a_f: self.a_f,
            d_f,
        }
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
        let g = self.gaps_at(params);
        let k = self.n_linear();
        let n = self.times.len();
        for part in 0..self.parts {
            let lin = &params[part * k..(part + 1) * k];
            for (row, &(tsep, tau)) in self.times.iter().enumerate() {
                out[part * n + row] = ratio_point(self.symmetric, lin, g, tsep, tau).value;
            }
        }
    }

    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>) {
        let gaps = self.gaps_at(params);
        let k = self.n_linear();
        let n = self.times.len();
        let g = self.parts * k;
        out.fill(0.0);
        for part in 0..self.parts {
            let lin = &params[part * k..(part + 1) * k];
            for (row, &(tsep, tau)) in self.times.iter().enumerate() {
                let r = part * n + row;
                let d = ratio_point(self.symmetric, lin, gaps, tsep, tau);
                for (j, b) in d.basis.iter().take(k).enumerate() {
                    out[(r, part * k + j)] = *b;
                }
                if self.shared_gap {
                    out[(r, g)] = d.d_gap_i + d.d_gap_f;
                } else {
                    out[(r, g)] = d.d_gap_i;
                    out[(r, g + 1)] = d.d_gap_f;
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ratio::two_state::jacobian_check::assert_jacobian_matches;

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
        assert_jacobian_matches(&model, &params);
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
        assert_jacobian_matches(&model, &[1.1, 0.4, 0.2, 0.5]);
    }
}

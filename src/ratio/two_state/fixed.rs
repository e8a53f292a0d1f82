//! The fixed-gap two-state fit of the ratio, joint over all `tsep` and `tau` (docs/methods.md §4).
//!
//! With `C2 = A_0 e^{-E_0 t} (1 + a e^{-Delta t})` at the source (`i`) and sink (`f`) momenta
//! and the three-point function's ground-state term times
//! `1 + b_i e^{-Delta_i tau} + b_f e^{-Delta_f (tsep - tau)} + b_if e^{-Delta_i tau - Delta_f (tsep - tau)}`,
//! the ratio is exactly
//!
//! ```text
//! R = [M + c_i e^{-Delta_i tau} + c_f e^{-Delta_f (tsep - tau)} + c_if e^{-Delta_i tau - Delta_f (tsep - tau)}] * F2
//! F2 = 1/(1 + a_f e^{-Delta_f tsep})
//!      * sqrt( (1 + a_i e^{-Delta_i (tsep - tau)}) (1 + a_f e^{-Delta_f tau}) (1 + a_f e^{-Delta_f tsep})
//!            / ((1 + a_f e^{-Delta_f (tsep - tau)}) (1 + a_i e^{-Delta_i tau}) (1 + a_i e^{-Delta_i tsep})) )
//! ```
//!
//! With `a` and `Delta` taken per resample from the two-point stage, the fit is linear in
//! `(M, c_i, c_f, c_if)` and solved in closed form per resample with the covariance frozen.
//! For `p_f = p_i` with identical interpolators `c_i = c_f` is enforced (one parameter).
//! The floating-gap and joint variants ([`super::floating`], [`super::joint`]) build on the
//! types and the fixed-gap solution of this module.

use super::designs::{DesignCache, DesignKey, DesignMemo};
use crate::data::Momentum;
use crate::ratio::lsq::{fit_re_im, Design};
use crate::ratio::{ChannelRatio, RatioPoint, RatioSettings, ReIm, ReImFit, STAGE};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::DMatrix;
use serde::Serialize;
use std::collections::BTreeMap;

/// Excited-state parameters of the two-point function at one momentum, per resample, as the
/// spectrum stage delivers them (the pipeline fills this from the spectrum output).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TwoPointStates {
    /// Ground-state energy `E_0` (carried for reports; the ratio fit needs only `a` and `Delta`).
    pub energy: Resampled,
    /// Amplitude ratio `a = A_1 / A_0`.
    pub amp_ratio: Resampled,
    /// Gap `Delta = E_1 - E_0` (positive).
    pub gap: Resampled,
}

/// Gaps fitted by the floating-gap variant.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FittedGaps {
    /// `Delta_i` at the source momentum.
    pub source: Resampled,
    /// `Delta_f` at the sink momentum.
    pub sink: Resampled,
}

/// The two-state estimate of one channel.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TwoStateFit {
    /// The matrix element `M` with the fit quality.
    pub m: ReImFit,
    /// Source-side excited-state coefficient `c_i`.
    pub c_i: ReIm,
    /// Sink-side coefficient `c_f` (equal to `c_i` when `symmetric`).
    pub c_f: ReIm,
    /// Excited-to-excited coefficient `c_if`.
    pub c_if: ReIm,
    /// Whether `c_i = c_f` was enforced (`p_f = p_i`, identical interpolators).
    pub symmetric: bool,
    /// The separations used.
    pub tseps: Vec<u32>,
    /// Number of `(tsep, tau)` points fitted.
    pub n_points: usize,
    /// Fitted gaps (floating-gap variant only).
    pub gaps: Option<FittedGaps>,
    /// The two-point parameters of the central fit, for drawing the fitted curve.
    pub shape: Gaps,
}

impl TwoStateFit {
    /// The fitted ratio `(Re, Im)` at `(tsep, tau)` from the central fit (the model of the
    /// module documentation), for drawing the curve through the data.
    pub fn curve(&self, tsep: f64, tau: f64) -> (f64, f64) {
        let g = self.shape;
        let ei = (-g.d_i * tau).exp();
        let ef = (-g.d_f * (tsep - tau)).exp();
        let f = f2(tsep, tau, g);
        let part = |m: f64, ci: f64, cf: f64, cif: f64| f * (m + ci * ei + cf * ef + cif * ei * ef);
        (
            part(
                self.m.value.re.central,
                self.c_i.re.central,
                self.c_f.re.central,
                self.c_if.re.central,
            ),
            part(
                self.m.value.im.central,
                self.c_i.im.central,
                self.c_f.im.central,
                self.c_if.im.central,
            ),
        )
    }
}

/// The two-point parameters of one fit at one resample: amplitude ratios `a` and gaps
/// `Delta` at the source (`i`) and sink (`f`) momenta.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Gaps {
    /// Source amplitude ratio.
    pub a_i: f64,
    /// Source gap.
    pub d_i: f64,
    /// Sink amplitude ratio.
    pub a_f: f64,
    /// Sink gap.
    pub d_f: f64,
}

/// `F2(tsep, tau)` of the module documentation.
pub(crate) fn f2(tsep: f64, tau: f64, g: Gaps) -> f64 {
    f2_with(tsep, tau, g, |t| (-g.d_i * t).exp(), |t| (-g.d_f * t).exp())
}

/// `F2` with `exp_i(t) = e^{-Delta_i t}` and `exp_f(t) = e^{-Delta_f t}` supplied (tabulated
/// by [`Setup::design_into`]); the same operations in the same order as [`f2`].
fn f2_with(
    tsep: f64,
    tau: f64,
    g: Gaps,
    exp_i: impl Fn(f64) -> f64,
    exp_f: impl Fn(f64) -> f64,
) -> f64 {
    let ci = |t: f64| 1.0 + g.a_i * exp_i(t);
    let cf = |t: f64| 1.0 + g.a_f * exp_f(t);
    let root = (ci(tsep - tau) * cf(tau) * cf(tsep)) / (cf(tsep - tau) * ci(tau) * ci(tsep));
    root.abs().sqrt() / cf(tsep)
}

/// Largest time for which [`Setup::design_into`] tabulates `e^{-Delta t}` on the stack.
const EXP_TABLE: usize = 64;

/// The fitted points and the two-point inputs of one channel.
pub(crate) struct Setup<'a> {
    pub points: Vec<&'a RatioPoint>,
    pub tseps: Vec<u32>,
    pub source: &'a TwoPointStates,
    pub sink: &'a TwoPointStates,
    pub symmetric: bool,
}

impl<'a> Setup<'a> {
    pub fn new(
        ratio: &'a ChannelRatio,
        states: &'a BTreeMap<Momentum, TwoPointStates>,
        settings: &RatioSettings,
    ) -> Result<Self> {
        let key = &ratio.key;
        let lookup = |p: Momentum, side: &str| {
            states.get(&p).ok_or_else(|| {
                Error::analysis(
                    STAGE,
                    format!(
                        "two-state fit of channel {key}: no two-point excited-state parameters \
                         at the {side} momentum {}",
                        crate::data::momentum_text(p)
                    ),
                )
            })
        };
        let source = lookup(key.source_momentum(), "source")?;
        let sink = lookup(key.pf, "sink")?;
        let n = ratio.points.first().map_or(0, |p| p.value.re.len());
        for s in [source, sink] {
            for (name, r) in [("amplitude ratio", &s.amp_ratio), ("gap", &s.gap)] {
                if r.len() != n || !r.is_finite() {
                    return Err(Error::analysis(
                        STAGE,
                        format!(
                            "two-state fit of channel {key}: the two-point {name} has {} samples \
                             (or non-finite values); the ratio has {n}",
                            r.len()
                        ),
                    ));
                }
            }
        }
        let mut points = Vec::new();
        let mut tseps = Vec::new();
        for tsep in ratio.tseps() {
            if tsep < settings.two_state_tsep_min {
                continue;
            }
            let p = ratio.fit_points(tsep, settings.tau_cut);
            if !p.is_empty() {
                tseps.push(tsep);
                points.extend(p);
            }
        }
        Ok(Setup {
            points,
            tseps,
            source,
            sink,
            symmetric: key.pf == key.source_momentum() && settings.identical_interpolators,
        })
    }

    /// The two-point parameters at resample `s` (`None` = central).
    pub fn gaps(&self, s: Option<usize>) -> Gaps {
        let at = |r: &Resampled| s.map_or(r.central, |k| r.samples[k]);
        Gaps {
            a_i: at(&self.source.amp_ratio),
            d_i: at(&self.source.gap),
            a_f: at(&self.sink.amp_ratio),
            d_f: at(&self.sink.gap),
        }
    }

    /// Whether every resample has the central gaps and amplitude ratios (bit for bit).
    pub fn gaps_are_fixed(&self) -> bool {
        let fixed = |r: &Resampled| {
            r.samples
                .iter()
                .all(|&x| x.to_bits() == r.central.to_bits())
        };
        [self.source, self.sink]
            .iter()
            .all(|s| fixed(&s.amp_ratio) && fixed(&s.gap))
    }

    /// Number of linear parameters: `(M, c_i, c_f, c_if)`, or `(M, c_i = c_f, c_if)` when
    /// symmetric.
    pub fn n_params(&self) -> usize {
        if self.symmetric {
            3
        } else {
            4
        }
    }

    /// Design matrix of the linear parameters for gaps `g`: columns `F2 * (1, e_i, e_f, e_i e_f)`,
    /// or `F2 * (1, e_i + e_f, e_i e_f)` when symmetric.
    pub fn design(&self, g: Gaps) -> DMatrix<f64> {
        let mut x = DMatrix::zeros(self.points.len(), self.n_params());
        self.design_into(g, &mut x);
        x
    }

    /// [`Setup::design`] written into `x` (`points` rows, [`Setup::n_params`] columns) without
    /// allocating. `e^{-Delta t}` and the two-point factors `1 + a e^{-Delta t}` of `F2` are
    /// evaluated once per integer time up to the largest `tsep` (when that fits
    /// [`EXP_TABLE`]), not once per use: the same values bit for bit, since `tau`, `tsep` and
    /// `tsep - tau` are the same integers either way and every factor is the same operation
    /// on the same exponential.
    pub fn design_into(&self, g: Gaps, x: &mut DMatrix<f64>) {
        let t_max = self.points.iter().map(|p| p.tsep).max().unwrap_or(0) as usize;
        let tabulated = t_max < EXP_TABLE && self.points.iter().all(|p| p.tau <= p.tsep);
        if !tabulated {
            let exp_i = |t: f64| (-g.d_i * t).exp();
            let exp_f = |t: f64| (-g.d_f * t).exp();
            for (row, p) in self.points.iter().enumerate() {
                let (tsep, tau) = (p.tsep as f64, p.tau as f64);
                let f = f2_with(tsep, tau, g, exp_i, exp_f);
                self.write_row(x, row, f, exp_i(tau), exp_f(tsep - tau));
            }
            return;
        }
        let (mut e_i, mut e_f) = ([0.0; EXP_TABLE], [0.0; EXP_TABLE]);
        let (mut c_i, mut c_f) = ([0.0; EXP_TABLE], [0.0; EXP_TABLE]);
        for t in 0..=t_max {
            e_i[t] = (-g.d_i * t as f64).exp();
            e_f[t] = (-g.d_f * t as f64).exp();
            c_i[t] = 1.0 + g.a_i * e_i[t];
            c_f[t] = 1.0 + g.a_f * e_f[t];
        }
        for (row, p) in self.points.iter().enumerate() {
            let (ts, tau) = (p.tsep as usize, p.tau as usize);
            let d = ts - tau;
            // f2_with's expression, term for term.
            let root = (c_i[d] * c_f[tau] * c_f[ts]) / (c_f[d] * c_i[tau] * c_i[ts]);
            let f = root.abs().sqrt() / c_f[ts];
            self.write_row(x, row, f, e_i[tau], e_f[d]);
        }
    }

    /// Row `row` of the design: `F2 * (1, e_i, e_f, e_i e_f)`, or `F2 * (1, e_i + e_f, e_i e_f)`
    /// when symmetric.
    fn write_row(&self, x: &mut DMatrix<f64>, row: usize, f: f64, ei: f64, ef: f64) {
        x[(row, 0)] = f;
        if self.symmetric {
            x[(row, 1)] = f * (ei + ef);
            x[(row, 2)] = f * ei * ef;
        } else {
            x[(row, 1)] = f * ei;
            x[(row, 2)] = f * ef;
            x[(row, 3)] = f * ei * ef;
        }
    }
}

/// Two-state fit of `ratio` with the gaps and amplitude ratios of `states` fixed per resample.
pub fn two_state_fixed(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
) -> Result<TwoStateFit> {
    two_state_fixed_and_late(ratio, states, settings, false, &mut DesignMemo::new(states)).0
}

/// [`two_state_fixed`] and, when `late` and the fit used at least three separations, the
/// same fit without its smallest separation. Points are ordered by `(tsep, tau)`, so the
/// second fit's points are the first's after those of the smallest separation, and a design
/// row depends only on its `(tsep, tau)` and the resample's gaps: the second fit takes its
/// per-resample designs from the first's rows below those points (the same values bit for
/// bit, computed once). `memo` keeps the designs for the next channel of the same momenta and
/// points.
pub(crate) fn two_state_fixed_and_late(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    late: bool,
    memo: &mut DesignMemo<'_, BTreeMap<Momentum, TwoPointStates>>,
) -> (Result<TwoStateFit>, Option<Result<TwoStateFit>>) {
    let setup = match Setup::new(ratio, states, settings) {
        Ok(s) => s,
        Err(e) => return (Err(e), None),
    };
    let designs = memo.designs(states, setup.design_key(ratio), || setup.designs());
    let first = fit_setup(&setup, ratio, settings, designs, 0);
    let second = (late && first.is_ok())
        .then(|| setup.without_smallest_tsep())
        .flatten()
        .map(|(late_setup, skip)| fit_setup(&late_setup, ratio, settings, designs, skip));
    (first, second)
}

impl<'a> Setup<'a> {
    /// This setup without the points of its smallest separation, and how many points that
    /// leaves out; `None` with fewer than three separations (the rest would be one only).
    fn without_smallest_tsep(&self) -> Option<(Setup<'a>, usize)> {
        let smallest = *self.tseps.first()?;
        if self.tseps.len() < 3 {
            return None;
        }
        let skip = self
            .points
            .iter()
            .take_while(|p| p.tsep == smallest)
            .count();
        Some((
            Setup {
                points: self.points[skip..].to_vec(),
                tseps: self.tseps[1..].to_vec(),
                source: self.source,
                sink: self.sink,
                symmetric: self.symmetric,
            },
            skip,
        ))
    }
}

impl Setup<'_> {
    /// What the designs of this setup of `ratio`'s points depend on besides the two-point
    /// states ([`DesignMemo`]).
    fn design_key(&self, ratio: &ChannelRatio) -> DesignKey {
        DesignKey {
            source: ratio.key.source_momentum(),
            sink: ratio.key.pf,
            symmetric: self.symmetric,
            points: self.points.iter().map(|p| (p.tsep, p.tau)).collect(),
        }
    }

    /// [`Setup::design_into`] for every resample's gaps, kept for the real and the imaginary
    /// fit and the fit without the smallest separation; none when every resample has the
    /// central gaps (one design, factorised once).
    fn designs(&self) -> DesignCache {
        if self.gaps_are_fixed() {
            return DesignCache::default();
        }
        let (rows, cols) = (self.points.len(), self.n_params());
        DesignCache::compute(rows, cols, self.source.gap.len(), |k, x| {
            self.design_into(self.gaps(Some(k)), x)
        })
    }
}

/// The fit of `setup`'s points, its per-resample designs taken from `designs` without their
/// first `skip` rows (computed afresh where `designs` has none of that shape).
fn fit_setup(
    setup: &Setup<'_>,
    ratio: &ChannelRatio,
    settings: &RatioSettings,
    designs: &DesignCache,
    skip: usize,
) -> Result<TwoStateFit> {
    let what = format!("two-state fit of channel {}", ratio.key);
    let values: Vec<&ReIm> = setup.points.iter().map(|p| &p.value).collect();
    // Two-point inputs without spread (fixed by hand, or a degenerate ensemble) give one
    // design for every resample: factorised once. Otherwise the real and the imaginary fits
    // use the same design per resample: filled once for both (same values, copied).
    let fill = |s: Option<usize>, x: &mut DMatrix<f64>| {
        if !s.is_some_and(|k| designs.copy_rows(k, skip, x)) {
            setup.design_into(setup.gaps(s), x)
        }
    };
    let design = if setup.gaps_are_fixed() {
        Design::Fixed(setup.design(setup.gaps(None)))
    } else {
        Design::PerSample {
            params: setup.n_params(),
            fill: &fill,
        }
    };
    let cached: Vec<_> = setup.points.iter().map(|p| &p.kept).collect();
    let (params, m) = fit_re_im(
        &values,
        Some(&cached),
        design,
        ratio.covariance(settings),
        &what,
    )?;
    let mut it = params.into_iter().skip(1);
    let missing = || Error::analysis(STAGE, format!("{what}: missing parameters"));
    let c_i = it.next().ok_or_else(missing)?;
    let c_f = if setup.symmetric {
        c_i.clone()
    } else {
        it.next().ok_or_else(missing)?
    };
    let c_if = it.next().ok_or_else(missing)?;
    let shape = setup.gaps(None);
    Ok(TwoStateFit {
        m,
        c_i,
        c_f,
        c_if,
        symmetric: setup.symmetric,
        tseps: setup.tseps.clone(),
        n_points: setup.points.len(),
        gaps: None,
        shape,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::resample::Scheme;

    // Definition (module documentation): the design's columns are F2 * (1, e_i, e_f, e_i e_f)
    // with e_i = e^{-Delta_i tau}, e_f = e^{-Delta_f (tsep - tau)}; the tabulated exponentials
    // must give the directly evaluated values bit for bit.
    #[test]
    fn tabulated_design_equals_the_direct_formula_bit_for_bit() {
        let value = || {
            let r = Resampled::constant(1.0, 3, Scheme::Jackknife);
            ReIm {
                re: r.clone(),
                im: r,
            }
        };
        let points: Vec<RatioPoint> = [(8u32, 2u32), (8, 6), (12, 3), (16, 8), (16, 14)]
            .iter()
            .map(|&(tsep, tau)| RatioPoint::new(tsep, tau, value()))
            .collect();
        let states = TwoPointStates {
            energy: Resampled::constant(0.5, 3, Scheme::Jackknife),
            amp_ratio: Resampled::constant(0.7, 3, Scheme::Jackknife),
            gap: Resampled::constant(0.3, 3, Scheme::Jackknife),
        };
        let g = Gaps {
            a_i: 0.83,
            d_i: 0.317,
            a_f: -0.21,
            d_f: 0.291,
        };
        for symmetric in [false, true] {
            let setup = Setup {
                points: points.iter().collect(),
                tseps: vec![8, 12, 16],
                source: &states,
                sink: &states,
                symmetric,
            };
            let x = setup.design(g);
            for (row, p) in points.iter().enumerate() {
                let (tsep, tau) = (p.tsep as f64, p.tau as f64);
                let f = f2(tsep, tau, g);
                let ei = (-g.d_i * tau).exp();
                let ef = (-g.d_f * (tsep - tau)).exp();
                let want = if symmetric {
                    vec![f, f * (ei + ef), f * ei * ef]
                } else {
                    vec![f, f * ei, f * ef, f * ei * ef]
                };
                for (col, w) in want.iter().enumerate() {
                    assert_eq!(x[(row, col)].to_bits(), w.to_bits(), "row {row} col {col}");
                }
            }
        }
    }

    fn resampled(central: f64, step: f64) -> Resampled {
        let samples = (0..5).map(|k| central + step * k as f64).collect();
        Resampled::new(central, samples, Scheme::Jackknife)
    }

    // The memo's designs are the channel's own (the definition of the cache), kept while the
    // key stays the same and recomputed when the momenta or the points change.
    #[test]
    fn memo_keeps_designs_for_the_same_key_only() {
        let states = |gap: f64| TwoPointStates {
            energy: resampled(0.5, 0.001),
            amp_ratio: resampled(0.8, 0.01),
            gap: resampled(gap, 0.002),
        };
        let (p0, p1): (Momentum, Momentum) = ([0, 0, 0], [1, 0, 0]);
        let map: BTreeMap<Momentum, TwoPointStates> = [(p0, states(0.3)), (p1, states(0.45))]
            .into_iter()
            .collect();
        let v = resampled(1.0, 0.0);
        let points: Vec<RatioPoint> = [(8, 2), (8, 6), (10, 3), (10, 5), (12, 4)]
            .iter()
            .map(|&(t, tau)| {
                RatioPoint::new(
                    t,
                    tau,
                    ReIm {
                        re: v.clone(),
                        im: v.clone(),
                    },
                )
            })
            .collect();
        let setup = |source: Momentum, n: usize| Setup {
            points: points[..n].iter().collect(),
            tseps: vec![8, 10, 12],
            source: &map[&source],
            sink: &map[&p0],
            symmetric: false,
        };
        let key = |source: Momentum, n: usize| DesignKey {
            source,
            sink: p0,
            symmetric: false,
            points: points[..n].iter().map(|p| (p.tsep, p.tau)).collect(),
        };
        let own = |s: &Setup<'_>| s.designs().get(4).map(<[f64]>::to_vec);
        let at = |d: &DesignCache| d.get(4).map(<[f64]>::to_vec);
        let mut memo = DesignMemo::new(&map);
        let first = memo.designs(&map, key(p1, 5), || setup(p1, 5).designs());
        let first_ptr = first.get(0).map(<[f64]>::as_ptr);
        assert_eq!(at(first), own(&setup(p1, 5)));
        let again = memo.designs(&map, key(p1, 5), || panic!("same key: must be kept"));
        assert_eq!(again.get(0).map(<[f64]>::as_ptr), first_ptr);
        let fewer = memo.designs(&map, key(p1, 4), || setup(p1, 4).designs());
        assert_eq!(at(fewer), own(&setup(p1, 4)), "other points: recomputed");
        let other = memo.designs(&map, key(p0, 4), || setup(p0, 4).designs());
        assert_eq!(at(other), own(&setup(p0, 4)), "other momentum: recomputed");
        assert_ne!(own(&setup(p0, 4)), own(&setup(p1, 4)));
        // A memo made for another map of states never hands out its designs.
        let copy = map.clone();
        let mut computed = false;
        memo.designs(&copy, key(p0, 4), || {
            computed = true;
            setup(p0, 4).designs()
        });
        assert!(computed);
    }
}

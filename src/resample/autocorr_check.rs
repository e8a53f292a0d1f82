//! The autocorrelation check of `formfactory inspect`: a few representative points of a
//! data set (the zero-momentum two-point function at `t = 1, T/4, T/2`, the first
//! three-point channel at `tau = tsep/2` in its larger part) and the integrated
//! autocorrelation time of each by the Gamma method ([`super::autocorr::gamma_method`],
//! Wolff's default window factor). The text is written by `io::inspect`; a run writes the
//! same points with their binning study ([`study`]) into its tables and report.

use super::autocorr::{binning_study, gamma_method, AutocorrResult, BinningPoint, DEFAULT_S};
use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::Result;
use std::collections::BTreeSet;

/// Wolff's windowing factor `S` (his recommended default).
pub const WINDOW_S: f64 = DEFAULT_S;

/// Above this integrated autocorrelation time, binning is advisable (common practice: with
/// `tau_int` well above 1/2 the naive error is too small by `sqrt(2 tau_int)`).
pub const TAU_INT_WARN: f64 = 1.5;

/// Which value's Monte Carlo history was checked.
#[derive(Clone, Debug, PartialEq)]
pub enum CheckedPoint<'a> {
    /// The real part of a two-point function at time `t`.
    TwoPoint {
        /// The channel.
        key: &'a TwoPointKey,
        /// The time slice.
        t: usize,
    },
    /// A three-point function at `tau`, in its imaginary part when that is the larger one.
    ThreePoint {
        /// The channel.
        key: &'a ThreePointKey,
        /// The operator insertion time.
        tau: usize,
        /// Whether the imaginary part was checked.
        imaginary: bool,
    },
}

/// One representative point and its Gamma-method result (or why it could not be estimated).
#[derive(Debug)]
pub struct PointAutocorr<'a> {
    /// The point.
    pub point: CheckedPoint<'a>,
    /// `tau_int` and its diagnostics.
    pub result: Result<AutocorrResult>,
}

impl<'a> PointAutocorr<'a> {
    /// The Gamma-method result of one point's Monte Carlo history `x`.
    fn of(point: CheckedPoint<'a>, x: &[f64]) -> Self {
        PointAutocorr {
            point,
            result: gamma_method(x, WINDOW_S),
        }
    }

    /// Whether `tau_int` is large enough that the configurations should be binned.
    pub fn binning_advised(&self) -> bool {
        self.result.as_ref().is_ok_and(|r| r.tau_int > TAU_INT_WARN)
    }
}

/// The representative points of the data and the integrated autocorrelation time of each.
pub fn check<'a>(
    two: Option<&'a TwoPointData>,
    three: Option<&'a ThreePointData>,
) -> Vec<PointAutocorr<'a>> {
    representative_points(two, three)
        .into_iter()
        .map(|(point, x)| PointAutocorr::of(point, &x))
        .collect()
}

/// One representative point with its integrated autocorrelation time and its binning study.
#[derive(Debug)]
pub struct PointStudy<'a> {
    /// The point and its Gamma-method result.
    pub autocorr: PointAutocorr<'a>,
    /// The naive error of the mean against the bin size, from 1 up to an eighth of the
    /// configurations (at least eight bins remain).
    pub binning: Vec<BinningPoint>,
}

/// The largest bin size a binning study tries on `n` configurations: `n / 8`, so that it
/// still leaves eight bins for its error estimate (common practice: with fewer bins the
/// error of the error exceeds a quarter).
fn largest_study_bin(n: usize) -> usize {
    (n / 8).max(1)
}

/// [`check`] with a binning study of every point, on the unbinned configurations.
pub fn study<'a>(
    two: Option<&'a TwoPointData>,
    three: Option<&'a ThreePointData>,
) -> Vec<PointStudy<'a>> {
    representative_points(two, three)
        .into_iter()
        .map(|(point, x)| PointStudy {
            binning: binning_study(&x, largest_study_bin(x.len())),
            autocorr: PointAutocorr::of(point, &x),
        })
        .collect()
}

/// Whether bins of `bin_size` configurations are too small for an integrated
/// autocorrelation time `tau_int` ± `tau_int_error`: the bins should span about `2 tau_int`
/// (then the binned error contains the autocorrelation, common practice); the check asks for
/// more than the estimate's own error, `2 (tau_int - error) > bin_size`, so that independent
/// data (`tau_int = 1/2`) are not flagged by noise.
pub fn bins_too_small(bin_size: usize, tau_int: f64, tau_int_error: f64) -> bool {
    2.0 * (tau_int - tau_int_error) > bin_size as f64
}

/// The points `check` and `study` look at, each with its Monte Carlo history.
fn representative_points<'a>(
    two: Option<&'a TwoPointData>,
    three: Option<&'a ThreePointData>,
) -> Vec<(CheckedPoint<'a>, Vec<f64>)> {
    let mut points: Vec<(CheckedPoint<'a>, Vec<f64>)> = Vec::new();
    if let Some(d) = two {
        let chosen = d
            .channels
            .iter()
            .find(|(k, _)| k.momentum == [0, 0, 0])
            .or_else(|| d.channels.iter().next());
        if let Some((key, s)) = chosen {
            for (t, x) in twopt_histories(s) {
                points.push((CheckedPoint::TwoPoint { key, t }, x));
            }
        }
    }
    if let Some((key, s)) = three.and_then(|d| d.channels.iter().next()) {
        let (tau, imaginary, x) = threept_history(s);
        let point = CheckedPoint::ThreePoint {
            key,
            tau,
            imaginary,
        };
        points.push((point, x));
    }
    points
}

/// Whether the two-point channel `key`, met after `chosen`, becomes the checked one: the
/// first channel in key order at zero momentum, else the first channel (a later channel of
/// an equal key replaces the earlier, as in a map). For readers that see channels one at a
/// time, in any order.
pub fn replaces_twopt_choice(key: &TwoPointKey, chosen: Option<&TwoPointKey>) -> bool {
    let zero = |k: &TwoPointKey| k.momentum == [0, 0, 0];
    match chosen {
        None => true,
        Some(c) => match (zero(key), zero(c)) {
            (true, false) => true,
            (false, true) => false,
            _ => key <= c,
        },
    }
}

/// The Monte Carlo histories checked in the chosen two-point channel: the real part at
/// `t = 1, T/4, T/2` (those below `T`, each once).
pub fn twopt_histories(s: &Series) -> Vec<(usize, Vec<f64>)> {
    let ts: BTreeSet<usize> = [1, s.n_t / 4, s.n_t / 2]
        .into_iter()
        .filter(|&t| t < s.n_t)
        .collect();
    ts.into_iter().map(|t| (t, s.re_at(t).to_vec())).collect()
}

/// The Monte Carlo history checked in the first three-point channel: `tau = (n_t - 1) / 2`
/// in the part (real or imaginary) whose sum over configurations is larger in magnitude;
/// returns `(tau, imaginary, history)`.
pub fn threept_history(s: &Series) -> (usize, bool, Vec<f64>) {
    let tau = s.n_t.saturating_sub(1) / 2;
    let (re, im) = (s.re_at(tau), s.im_at(tau));
    let size = |x: &[f64]| x.iter().sum::<f64>().abs();
    let imaginary = size(im) > size(re);
    let x = if imaginary { im } else { re };
    (tau, imaginary, x.to_vec())
}

/// The integrated autocorrelation time of points already chosen (by a reader that streams
/// the data, with [`replaces_twopt_choice`], [`twopt_histories`] and [`threept_history`]);
/// [`check`] on the whole data gives the same.
pub fn check_points<'a>(points: Vec<(CheckedPoint<'a>, &[f64])>) -> Vec<PointAutocorr<'a>> {
    points
        .into_iter()
        .map(|(point, x)| PointAutocorr::of(point, x))
        .collect()
}

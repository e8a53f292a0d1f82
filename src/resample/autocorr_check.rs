//! The autocorrelation check of `formfactory inspect`: a few representative points of a
//! data set (the zero-momentum two-point function at `t = 1, T/4, T/2`, the first
//! three-point channel at `tau = tsep/2` in its larger part) and the integrated
//! autocorrelation time of each by the Gamma method ([`super::autocorr::gamma_method`],
//! Wolff's default window factor). The text is written by `io::inspect`.

use super::autocorr::{gamma_method, AutocorrResult, DEFAULT_S};
use crate::data::{ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
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

impl PointAutocorr<'_> {
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
    let mut points: Vec<(CheckedPoint<'a>, Vec<f64>)> = Vec::new();
    if let Some(d) = two {
        let chosen = d
            .channels
            .iter()
            .find(|(k, _)| k.momentum == [0, 0, 0])
            .or_else(|| d.channels.iter().next());
        if let Some((key, s)) = chosen {
            let ts: BTreeSet<usize> = [1, s.n_t / 4, s.n_t / 2]
                .into_iter()
                .filter(|&t| t < s.n_t)
                .collect();
            for t in ts {
                points.push((CheckedPoint::TwoPoint { key, t }, s.re_at(t).to_vec()));
            }
        }
    }
    if let Some(d) = three {
        if let Some((key, s)) = d.channels.iter().next() {
            let tau = s.n_t.saturating_sub(1) / 2;
            let (re, im) = (s.re_at(tau), s.im_at(tau));
            let size = |x: &[f64]| x.iter().sum::<f64>().abs();
            let imaginary = size(im) > size(re);
            let x = if imaginary { im } else { re };
            let point = CheckedPoint::ThreePoint {
                key,
                tau,
                imaginary,
            };
            points.push((point, x.to_vec()));
        }
    }
    points
        .into_iter()
        .map(|(point, x)| PointAutocorr {
            point,
            result: gamma_method(&x, WINDOW_S),
        })
        .collect()
}

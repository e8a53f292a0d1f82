//! Cross-check of the excited-state methods (docs/methods.md §4): the plateau at every `tsep`, the
//! summation slope and the two-state `M` side by side. Each difference is divided by its own
//! error, computed from the resamples of the difference: the estimates come from the same
//! data and are correlated, so adding their errors in quadrature would overstate the error
//! of the difference (and hide real tension).

use super::{Estimator, PlateauFit, ReIm, SummationFit, TwoStateFit};
use crate::resample::Resampled;
use serde::Serialize;

/// How far apart two estimates are.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Flag {
    /// Within one standard deviation of the difference.
    Consistent,
    /// Between one and two standard deviations.
    Above1Sigma,
    /// More than two standard deviations.
    Above2Sigma,
}

impl Flag {
    /// The flag as written in tables and read by the report (`consistent`, `above1sigma`,
    /// `above2sigma`).
    pub fn name(self) -> &'static str {
        match self {
            Flag::Consistent => "consistent",
            Flag::Above1Sigma => "above1sigma",
            Flag::Above2Sigma => "above2sigma",
        }
    }

    /// The flag of a significance `|diff| / error`.
    pub fn of(sigma: f64) -> Flag {
        if sigma > 2.0 {
            Flag::Above2Sigma
        } else if sigma > 1.0 {
            Flag::Above1Sigma
        } else {
            Flag::Consistent
        }
    }
}

/// A difference with its resampled error and significance.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Difference {
    /// `a - b`, resampled.
    pub value: Resampled,
    /// Error of the difference, from its resamples.
    pub error: f64,
    /// `|central| / error` (0 for an exactly zero difference, infinite for a non-zero
    /// difference without error).
    pub sigma: f64,
    /// The flag of this part alone (real and imaginary parts are judged separately).
    pub flag: Flag,
    /// False when both estimates are exactly equal on every resample (e.g. an imaginary
    /// part that vanishes by symmetry): not a comparison, and not counted as one.
    pub informative: bool,
}

/// The difference `a - b` and its significance, with the error taken from the resamples of
/// the difference (keeps the correlation between `a` and `b`).
pub fn difference(a: &Resampled, b: &Resampled) -> Difference {
    let value = a - b;
    let error = value.error();
    let size = value.central.abs();
    let sigma = if size == 0.0 {
        0.0
    } else if error > 0.0 {
        size / error
    } else {
        f64::INFINITY
    };
    Difference {
        informative: error > 0.0 || size > 0.0,
        flag: Flag::of(sigma),
        value,
        error,
        sigma,
    }
}

/// One comparison of two methods in one channel.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CrossCheckRow {
    /// The method compared.
    pub method: Estimator,
    /// The method it is compared with.
    pub reference: Estimator,
    /// Real part of `method - reference`.
    pub re: Difference,
    /// Imaginary part of `method - reference`.
    pub im: Difference,
    /// The larger flag of the two parts (each part's own flag is in [`Difference::flag`];
    /// count parts, not rows, when tallying).
    pub flag: Flag,
}

fn row(method: Estimator, a: &ReIm, reference: Estimator, b: &ReIm) -> CrossCheckRow {
    let re = difference(&a.re, &b.re);
    let im = difference(&a.im, &b.im);
    let flag = re.flag.max(im.flag);
    CrossCheckRow {
        method,
        reference,
        re,
        im,
        flag,
    }
}

/// All comparisons available: every plateau against the summation and the two-state result,
/// and the summation against the two-state result.
pub fn cross_check(
    plateaus: &[PlateauFit],
    summation: Option<&SummationFit>,
    two_state: Option<&TwoStateFit>,
) -> Vec<CrossCheckRow> {
    let mut rows = Vec::new();
    let summation = summation.map(|s| (Estimator::Summation, &s.slope.value));
    let two_state = two_state.map(|t| (Estimator::TwoState, &t.m.value));
    for p in plateaus {
        for (reference, value) in summation.iter().chain(two_state.iter()) {
            rows.push(row(
                Estimator::plateau_at(p.tsep),
                &p.fit.value,
                *reference,
                value,
            ));
        }
    }
    if let (Some((ms, s)), Some((mt, t))) = (summation, two_state) {
        rows.push(row(ms, s, mt, t));
    }
    rows
}

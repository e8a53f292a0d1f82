//! User settings of the ratio stage, as read from the pipeline file (serde + JSON Schema),
//! with the defaults stated beside each field.

use super::Estimator;
use crate::resample::covariance::{CovarianceKind, CovarianceOptions};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// What to do with a sample whose product under the square root of the ratio is negative
/// (possible on noisy samples at large times, methods.md §3). Either way the count per
/// channel is reported in [`super::NegativeRootCount`] and no NaN leaves the stage.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum NegativeRootPolicy {
    /// Use `sqrt(|product|)` on the offending samples (and central value).
    #[default]
    AbsValue,
    /// Drop the `(tsep, tau)` point when the product is negative on the central value;
    /// remaining negative samples of kept points use `sqrt(|product|)`.
    DropPoint,
}

/// Which two-state fit of the ratio to run (methods.md §4).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum TwoStateVariant {
    /// Gaps and amplitude ratios fixed per resample from the two-point stage; the fit is
    /// linear in `(M, c_i, c_f, c_if)` and solved in closed form.
    #[default]
    FixedGaps,
    /// Gaps floating with Gaussian priors (centre and width from the two-point stage's
    /// central value and error, the width scaled by `prior_width_factor`); non-linear.
    FloatingGaps {
        /// Multiplier of the two-point error used as the prior width (default 1).
        #[serde(default = "one")]
        prior_width_factor: f64,
    },
    /// Joint fit of the ratio and the two-point functions at the source and sink momenta
    /// (`t_min <= t <= t_max`) with shared energies, gaps and amplitude ratios; non-linear,
    /// no priors.
    JointWithTwoPoint {
        /// First two-point time slice fitted.
        t_min: u32,
        /// Last two-point time slice fitted.
        t_max: u32,
    },
}

fn one() -> f64 {
    1.0
}

/// Settings of the ratio stage.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct RatioSettings {
    /// Points with `tau < tau_cut` or `tau > tsep - tau_cut` are left out of every fit
    /// (default 1: the contact points `tau = 0, tsep` are excluded).
    pub tau_cut: u32,
    /// Smallest `tsep` used by the summation fit (default 0: all).
    pub summation_tsep_min: u32,
    /// Smallest `tsep` used by the two-state fit (default 0: all).
    pub two_state_tsep_min: u32,
    /// Two-state variant (default: fixed gaps).
    pub two_state: TwoStateVariant,
    /// Whether source and sink interpolators are identical, so that `c_i = c_f` is enforced
    /// when `p_f = p_i` (default true).
    pub identical_interpolators: bool,
    /// Interpolator label of the two-point channels that divide the three-point function
    /// (default: none, i.e. the table without a `smear` column).
    pub two_point_smear: Option<String>,
    /// Policy for negative products under the square root (default: absolute value).
    pub negative_root: NegativeRootPolicy,
    /// Which estimator feeds the final result (default: `two_state`; `plateau` means the
    /// plateau at the largest `tsep` with a fit).
    pub final_method: Estimator,
    /// Covariance of the fitted points, estimated once from the resamples and frozen
    /// (default: diagonal — the closure tests in `tests/closure.rs` found that full-covariance
    /// weights over the 30–50 points of a two-state fit with ~100 samples under-quote the
    /// errors, as methods.md §2 warns; the resampled error stays honest with diagonal weights). YAML as in the resample stage: `kind: full | diagonal | shrinkage` or
    /// `kind: {shrinkage: {target: diagonal|identity, intensity: 0..1}}`, and `eigen_cut`.
    pub covariance: CovarianceOptions,
}

impl Default for RatioSettings {
    fn default() -> Self {
        RatioSettings {
            tau_cut: 1,
            summation_tsep_min: 0,
            two_state_tsep_min: 0,
            two_state: TwoStateVariant::default(),
            identical_interpolators: true,
            two_point_smear: None,
            negative_root: NegativeRootPolicy::default(),
            final_method: Estimator::TwoState,
            covariance: CovarianceOptions {
                kind: CovarianceKind::Diagonal,
                eigen_cut: None,
            },
        }
    }
}

//! User settings of the ratio stage, as read from the pipeline file (serde + JSON Schema),
//! with the defaults stated beside each field.

use super::Estimator;
use crate::resample::covariance::{CovarianceKind, CovarianceOptions};
use crate::Invalid;
use schemars::JsonSchema;
use serde::de::{self, EnumAccess, MapAccess, VariantAccess, Visitor};
use serde::{Deserialize, Deserializer, Serialize};
use std::fmt;

/// What to do with a sample whose product under the square root of the ratio is negative
/// (possible on noisy samples at large times, docs/methods.md §3). Either way the count per
/// channel is reported and no NaN leaves the stage.
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

/// Which two-state fit of the ratio to run (docs/methods.md §4).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, JsonSchema)]
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

/// The fields of `floating_gaps`.
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FloatingFields {
    #[serde(default = "one")]
    prior_width_factor: f64,
}

/// The fields of `joint_with_two_point`.
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct JointFields {
    t_min: u32,
    t_max: u32,
}

const TWO_STATE_NAMES: &[&str] = &["fixed_gaps", "floating_gaps", "joint_with_two_point"];

impl TwoStateVariant {
    fn floating(f: FloatingFields) -> Self {
        TwoStateVariant::FloatingGaps {
            prior_width_factor: f.prior_width_factor,
        }
    }

    fn joint(f: JointFields) -> Self {
        TwoStateVariant::JointWithTwoPoint {
            t_min: f.t_min,
            t_max: f.t_max,
        }
    }
}

/// Read in every form a user writes: `fixed_gaps`, a one-key map
/// `{floating_gaps: {prior_width_factor: 2}}` (the form of the JSON Schema) or a YAML tag
/// `!floating_gaps {prior_width_factor: 2}` (the form serde_yaml_ng writes).
impl<'de> Deserialize<'de> for TwoStateVariant {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        struct Visit;
        impl<'de> Visitor<'de> for Visit {
            type Value = TwoStateVariant;

            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str(
                    "`fixed_gaps`, `{floating_gaps: {prior_width_factor: ..}}` or \
                     `{joint_with_two_point: {t_min: .., t_max: ..}}`",
                )
            }

            fn visit_str<E: de::Error>(self, s: &str) -> Result<Self::Value, E> {
                match s {
                    "fixed_gaps" => Ok(TwoStateVariant::FixedGaps),
                    other => Err(E::unknown_variant(other, TWO_STATE_NAMES)),
                }
            }

            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<Self::Value, A::Error> {
                let Some(key) = map.next_key::<String>()? else {
                    return Err(de::Error::invalid_length(0, &self));
                };
                let value = match key.as_str() {
                    "fixed_gaps" => {
                        map.next_value::<de::IgnoredAny>()?;
                        TwoStateVariant::FixedGaps
                    }
                    "floating_gaps" => TwoStateVariant::floating(map.next_value()?),
                    "joint_with_two_point" => TwoStateVariant::joint(map.next_value()?),
                    other => return Err(de::Error::unknown_variant(other, TWO_STATE_NAMES)),
                };
                if map.next_key::<de::IgnoredAny>()?.is_some() {
                    return Err(de::Error::invalid_length(2, &self));
                }
                Ok(value)
            }

            fn visit_enum<A: EnumAccess<'de>>(self, data: A) -> Result<Self::Value, A::Error> {
                let (name, variant): (String, _) = data.variant()?;
                match name.as_str() {
                    "fixed_gaps" => variant.unit_variant().map(|()| TwoStateVariant::FixedGaps),
                    "floating_gaps" => variant.newtype_variant().map(TwoStateVariant::floating),
                    "joint_with_two_point" => variant.newtype_variant().map(TwoStateVariant::joint),
                    other => Err(de::Error::unknown_variant(other, TWO_STATE_NAMES)),
                }
            }
        }
        deserializer.deserialize_any(Visit)
    }
}

/// Settings of the ratio stage.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct RatioSettings {
    /// Estimators whose results are tabulated, decomposed and cross-checked: `plateau`
    /// (every separation) or `plateau_tsep<N>`, `summation`, `two_state` (default: all
    /// three).
    pub methods: Vec<Estimator>,
    /// Points with `tau < tau_cut` or `tau > tsep - tau_cut` are left out of every fit
    /// (default 1: the contact points `tau = 0, tsep` are excluded).
    pub tau_cut: u32,
    /// Smallest `tsep` used by the summation fit (default 0: all).
    pub summation_tsep_min: u32,
    /// Smallest `tsep` used by the two-state fit (default 0: all).
    pub two_state_tsep_min: u32,
    /// Also fit the two-state form without its smallest separation (`two_state_late`, when the
    /// two-state fit has at least three); the final values then take that fit, with its shift
    /// from the fit over every separation, beyond that shift's noise, as the excited-state
    /// error (docs/methods.md §4).
    /// Default true; false saves the second fit (about a tenth of a run) and gives the
    /// two-state value with the summation difference as that error.
    pub two_state_late: bool,
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
    /// Covariance of the fitted points, estimated once from the resamples; its correlations
    /// are frozen, and in a jackknife run each resample of a plateau, summation or fixed-gap
    /// two-state fit rescales the variances by its own (default: diagonal — the closure tests in `tests/closure.rs` found that full-covariance
    /// weights over the 30–50 points of a two-state fit with ~100 samples under-quote the
    /// errors, as docs/methods.md §2 warns; the resampled error stays honest with diagonal weights).
    /// YAML as in the resample stage: `kind: full | diagonal | shrinkage` or
    /// `kind: {shrinkage: {target: diagonal|identity, intensity: 0..1}}`, and `eigen_cut`.
    /// A block that leaves out `kind` keeps the diagonal default.
    #[serde(deserialize_with = "ratio_covariance")]
    #[schemars(with = "RatioCovariance")]
    pub covariance: CovarianceOptions,
}

/// The ratio stage's covariance block: as the resample stage's, with `kind` defaulting to
/// diagonal (the section's default) so that `covariance: {eigen_cut: 0.01}` keeps it.
#[derive(Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
struct RatioCovariance {
    /// Full, diagonal or shrinkage.
    #[serde(default = "diagonal")]
    kind: CovarianceKind,
    /// Raise correlation-matrix eigenvalues below `eigen_cut * λ_max` to that floor.
    #[serde(default)]
    eigen_cut: Option<f64>,
}

fn diagonal() -> CovarianceKind {
    CovarianceKind::Diagonal
}

fn ratio_covariance<'de, D: serde::Deserializer<'de>>(d: D) -> Result<CovarianceOptions, D::Error> {
    let c = RatioCovariance::deserialize(d)?;
    Ok(CovarianceOptions {
        kind: c.kind,
        eigen_cut: c.eigen_cut,
    })
}

impl Default for RatioSettings {
    fn default() -> Self {
        RatioSettings {
            methods: vec![
                Estimator::Plateau { tsep: None },
                Estimator::Summation,
                Estimator::TwoState,
            ],
            tau_cut: 1,
            summation_tsep_min: 0,
            two_state_tsep_min: 0,
            two_state_late: true,
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

impl RatioSettings {
    /// Check the choice of estimators: at least one, and the final one among them.
    pub fn validate(&self) -> Result<(), Invalid> {
        if self.methods.is_empty() {
            return Err(Invalid::new(
                "methods",
                format!(
                    "no excited-state method chosen: expected some of {}",
                    Estimator::VALID
                ),
            ));
        }
        let late = Estimator::TwoStateLate;
        if !self.two_state_late && (self.final_method == late || self.methods.contains(&late)) {
            let key = if self.final_method == late {
                "final_method"
            } else {
                "methods"
            };
            return Err(Invalid::new(
                key,
                "`two_state_late` is made only with `two_state_late: true` (the default, turned \
                 off here; and `two_state` among the methods)",
            ));
        }
        let f = self.final_method;
        if !self
            .methods
            .iter()
            .any(|m| m.with_companions(f) || f.selects(*m))
        {
            let run: Vec<String> = self.methods.iter().map(Estimator::to_string).collect();
            return Err(Invalid::new(
                "final_method",
                format!(
                    "the final method `{f}` is not among the methods run ({})",
                    run.join(", ")
                ),
            ));
        }
        Ok(())
    }

    /// Why `tsep` leaves no insertion point inside the `tau_cut` window (`None`: it does).
    pub fn tsep_problem(&self, tsep: u32) -> Option<String> {
        (2 * self.tau_cut >= tsep).then(|| {
            format!(
                "tsep = {tsep} leaves no insertion point with tau_cut = {}: expected tau_cut < tsep/2",
                self.tau_cut
            )
        })
    }
}

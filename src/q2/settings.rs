//! The settings of one Q² fit as written in the pipeline file: the shape (`dipole` or
//! `z-expansion` with its `t_cut`, `t0`, `kmax`, prior, sum rules and pole), the weights and
//! the solver.

use super::priors::ZPrior;
use crate::fit::{FitSettings, Weighting};
use serde::de::{self, EnumAccess, MapAccess, VariantAccess, Visitor};
use serde::{Deserialize, Deserializer, Serialize};
use std::fmt;

/// Which shape to fit, with its options.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(tag = "model", rename_all = "kebab-case", deny_unknown_fields)]
pub enum Q2Model {
    /// `G(0) / (1 + Q²/M²)^power`.
    Dipole {
        /// Exponent (2 = dipole, 1 = monopole).
        #[serde(default = "default_power")]
        power: f64,
    },
    /// z-expansion.
    ZExpansion {
        /// Branch-point `t_cut`.
        t_cut: TCut,
        /// Choice of `t0`.
        #[serde(default)]
        t0: T0,
        /// Highest power of `z`.
        #[serde(default = "default_kmax")]
        kmax: usize,
        /// Gaussian prior on every free `a_k / a_0`: `auto` (the default: width from the
        /// data's range in `z`, see the report), `{mean, width}`, or `null` for none.
        #[serde(default = "default_prior")]
        prior: Option<ZPrior>,
        /// Number of sum rules `sum_k k^n a_k = 0` imposed, `n = 0..sum_rules` (0 to 4).
        #[serde(default)]
        sum_rules: usize,
        /// Mass of an explicit pole factor `1/(1 + Q²/M²)` (units of `sqrt(Q²)`), for heavy
        /// pions where the lowest meson lies below `t_cut`; `null` for none.
        #[serde(default)]
        pole_mass: Option<f64>,
    },
}

fn default_power() -> f64 {
    2.0
}
fn default_kmax() -> usize {
    4
}
fn default_prior() -> Option<ZPrior> {
    Some(ZPrior::default())
}

/// `t_cut` in the units of the fitted Q²: a value or a multi-pion threshold `(n m_pi)²`
/// (4 m_pi² for the isovector vector current, 9 m_pi² for the isovector axial current).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(untagged)]
pub enum TCut {
    /// An explicit `t_cut`.
    Value(f64),
    /// `(n_pions * pion_mass)²`.
    Threshold {
        /// Pion mass in the units of `sqrt(Q²)`.
        pion_mass: f64,
        /// Number of pions (2 vector, 3 axial).
        n_pions: u32,
    },
}

impl TCut {
    /// The value of `t_cut`.
    pub fn value(self) -> f64 {
        match self {
            TCut::Value(v) => v,
            TCut::Threshold { pion_mass, n_pions } => (f64::from(n_pions) * pion_mass).powi(2),
        }
    }
}

/// Choice of `t0` in the z-expansion.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, schemars::JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum T0 {
    /// `t0 = 0`, so that `z(0) = 0`.
    #[default]
    Zero,
    /// `t0 = t_cut (1 - sqrt(1 + Q²_max / t_cut))` with `Q²_max` the largest fitted Q².
    Optimal,
    /// An explicit value.
    Value(f64),
}

const T0_NAMES: &[&str] = &["zero", "optimal", "value"];

/// Read in every form a user writes: `zero`, `optimal`, a one-key map `{value: 0.1}` (the
/// form of the JSON Schema) or a YAML tag `!value 0.1` (the form serde_yaml_ng writes).
impl<'de> Deserialize<'de> for T0 {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> std::result::Result<Self, D::Error> {
        struct Visit;
        impl<'de> Visitor<'de> for Visit {
            type Value = T0;

            fn expecting(&self, f: &mut fmt::Formatter) -> fmt::Result {
                f.write_str("`zero`, `optimal` or `{value: <t0>}`")
            }

            fn visit_str<E: de::Error>(self, s: &str) -> std::result::Result<T0, E> {
                match s {
                    "zero" => Ok(T0::Zero),
                    "optimal" => Ok(T0::Optimal),
                    other => Err(E::unknown_variant(other, T0_NAMES)),
                }
            }

            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> std::result::Result<T0, A::Error> {
                let Some(key) = map.next_key::<String>()? else {
                    return Err(de::Error::invalid_length(0, &self));
                };
                let value = match key.as_str() {
                    "value" => T0::Value(map.next_value()?),
                    other => return Err(de::Error::unknown_variant(other, T0_NAMES)),
                };
                if map.next_key::<de::IgnoredAny>()?.is_some() {
                    return Err(de::Error::invalid_length(2, &self));
                }
                Ok(value)
            }

            fn visit_enum<A: EnumAccess<'de>>(self, data: A) -> std::result::Result<T0, A::Error> {
                let (name, variant): (String, _) = data.variant()?;
                match name.as_str() {
                    "zero" => variant.unit_variant().map(|()| T0::Zero),
                    "optimal" => variant.unit_variant().map(|()| T0::Optimal),
                    "value" => variant.newtype_variant().map(T0::Value),
                    other => Err(de::Error::unknown_variant(other, T0_NAMES)),
                }
            }
        }
        deserializer.deserialize_any(Visit)
    }
}

/// Settings of one Q² fit: the shape (`model` and its keys) and how it is fitted.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
pub struct Q2FitSettings {
    /// The shape.
    #[serde(flatten)]
    pub model: Q2Model,
    /// Weights.
    #[serde(default)]
    pub weights: Weighting,
    /// Fit only points with central Q² at most this (units of the fitted Q²).
    #[serde(default)]
    pub q2_max: Option<f64>,
    /// Solver settings.
    #[serde(default)]
    pub solver: FitSettings,
}

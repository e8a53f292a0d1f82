//! The range-checked number types of a mock spec and the field-level (de)serializers its
//! types name in `#[serde(...)]` attributes: every rule here concerns one value, so a
//! violation is reported while the YAML is read, with its line and column.

use crate::data::{Current, Projector};
use schemars::JsonSchema;
use serde::{Deserialize, Deserializer, Serialize};

/// A finite number `> 0`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, JsonSchema)]
#[serde(transparent)]
pub struct Positive(pub f64);

/// A finite number `>= 0`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, JsonSchema)]
#[serde(transparent)]
pub struct NonNegative(pub f64);

/// A correlation coefficient strictly inside `(-1, 1)`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, JsonSchema)]
#[serde(transparent)]
pub struct Correlation(pub f64);

impl<'de> Deserialize<'de> for Positive {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        let x = f64::deserialize(d)?;
        if x.is_finite() && x > 0.0 {
            Ok(Positive(x))
        } else {
            Err(serde::de::Error::custom(format!(
                "expected a positive number, found {x}"
            )))
        }
    }
}

impl<'de> Deserialize<'de> for NonNegative {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        let x = f64::deserialize(d)?;
        if x.is_finite() && x >= 0.0 {
            Ok(NonNegative(x))
        } else {
            Err(serde::de::Error::custom(format!(
                "expected a number >= 0, found {x}"
            )))
        }
    }
}

impl<'de> Deserialize<'de> for Correlation {
    fn deserialize<D: Deserializer<'de>>(d: D) -> std::result::Result<Self, D::Error> {
        let x = f64::deserialize(d)?;
        if x.is_finite() && x.abs() < 1.0 {
            Ok(Correlation(x))
        } else {
            Err(serde::de::Error::custom(format!(
                "expected a correlation coefficient strictly between -1 and 1, found {x}"
            )))
        }
    }
}

pub(super) fn one() -> i64 {
    1
}

pub(super) fn yes() -> bool {
    true
}

pub(super) fn positive_usize<'de, D: Deserializer<'de>>(
    d: D,
) -> std::result::Result<usize, D::Error> {
    let n = i64::deserialize(d)?;
    usize::try_from(n)
        .ok()
        .filter(|&n| n > 0)
        .ok_or_else(|| serde::de::Error::custom(format!("expected a positive integer, found {n}")))
}

pub(super) fn positive_i64<'de, D: Deserializer<'de>>(d: D) -> std::result::Result<i64, D::Error> {
    let n = i64::deserialize(d)?;
    if n > 0 {
        Ok(n)
    } else {
        Err(serde::de::Error::custom(format!(
            "expected a positive integer, found {n}"
        )))
    }
}

pub(super) fn currents<'de, D: Deserializer<'de>>(
    d: D,
) -> std::result::Result<Vec<Current>, D::Error> {
    Vec::<String>::deserialize(d)?
        .iter()
        .map(|s| {
            Current::parse(s).ok_or_else(|| {
                serde::de::Error::custom(format!(
                    "`currents`: unknown current `{s}`; expected one of V1..V4, A1..A4, S, P, T12, T13, T14, T23, T24, T34"
                ))
            })
        })
        .collect()
}

pub(super) fn current_names<S: serde::Serializer>(
    c: &[Current],
    s: S,
) -> std::result::Result<S::Ok, S::Error> {
    s.collect_seq(c.iter().map(|c| c.name()))
}

pub(super) fn projector_names<S: serde::Serializer>(
    p: &[Projector],
    s: S,
) -> std::result::Result<S::Ok, S::Error> {
    s.collect_seq(p.iter().map(|p| p.name()))
}

pub(super) fn projectors<'de, D: Deserializer<'de>>(
    d: D,
) -> std::result::Result<Vec<Projector>, D::Error> {
    Vec::<String>::deserialize(d)?
        .iter()
        .map(|s| {
            Projector::parse(s).ok_or_else(|| {
                serde::de::Error::custom(format!(
                    "`projectors`: unknown projector `{s}`; expected unpol, pol1, pol2, pol3 or none"
                ))
            })
        })
        .collect()
}

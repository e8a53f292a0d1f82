//! The one name of an excited-state estimator.
//!
//! The ratio stage extracts a matrix element in several ways (plateau at each separation,
//! summation, two-state fit); the settings choose among them, the cross-check compares them
//! and every table, plot, message and report line labels its numbers with one of them.
//! [`Estimator`] is that one type, and its [`Display`](fmt::Display) is the one place that
//! spells a label: the same text is read from and written to YAML (serde goes through
//! [`FromStr`] and `Display`), printed in the tables and shown in plot legends.
//!
//! Labels: `plateau` (every separation, or as the final choice the largest separation with
//! a fit), `plateau_tsep12` (the plateau at `tsep = 12`), `summation`, `two_state` (the
//! two-state fit in whichever variant `excited_states.two_state` selects).

use schemars::gen::SchemaGenerator;
use schemars::schema::{InstanceType, Schema, SchemaObject, StringValidation};
use schemars::JsonSchema;
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use std::fmt;
use std::str::FromStr;

/// An excited-state estimator of a matrix element.
///
/// The derived order is the order of tables and legends: plateaus by increasing `tsep`,
/// then summation, then two-state.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Estimator {
    /// Constant fit of the ratio's middle region. `tsep: None` in the settings stands for
    /// every separation (in `methods`) or the largest one with a fit (as `final_method`).
    Plateau {
        /// The separation, when one is meant.
        tsep: Option<u32>,
    },
    /// Slope of the summed ratio in `tsep`.
    Summation,
    /// Two-state fit over all separations and insertion times.
    TwoState,
    /// The same two-state fit without its smallest separation (from the second-smallest
    /// `tsep` the two-state fit uses): the final value's reference, with the shift from
    /// [`Estimator::TwoState`] as its excited-state error (docs/methods.md §4). Runs with
    /// `two_state` when `excited_states.two_state_late` is set and that fit has at least three
    /// separations.
    TwoStateLate,
}

const PLATEAU_TSEP: &str = "plateau_tsep";
const TWO_STATE_LATE: &str = "two_state_late";
/// An older spelling of `plateau` as the final choice, still read.
const PLATEAU_LARGEST: &str = "plateau_largest_tsep";

impl Estimator {
    /// The plateau at one separation.
    pub fn plateau_at(tsep: u32) -> Estimator {
        Estimator::Plateau { tsep: Some(tsep) }
    }

    /// The estimator without its separation (`plateau_tsep12` → `plateau`).
    pub fn kind(self) -> Estimator {
        match self {
            Estimator::Plateau { .. } => Estimator::Plateau { tsep: None },
            other => other,
        }
    }

    /// The separation of a plateau at one `tsep`.
    pub fn tsep(self) -> Option<u32> {
        match self {
            Estimator::Plateau { tsep } => tsep,
            _ => None,
        }
    }

    /// Whether a setting `self` selects the concrete estimator `other` (`plateau` selects
    /// every plateau; anything else only itself). [`Estimator::with_companions`] says which
    /// estimators a method in `excited_states.methods` brings with it.
    pub fn selects(self, other: Estimator) -> bool {
        match (self, other) {
            (Estimator::Plateau { tsep: None }, Estimator::Plateau { .. }) => true,
            _ => self == other,
        }
    }

    /// Whether listing `self` in `excited_states.methods` produces `other`: what
    /// [`Estimator::selects`] says, and `two_state` also brings its `two_state_late` fit.
    pub fn with_companions(self, other: Estimator) -> bool {
        self.selects(other) || (self == Estimator::TwoState && other == Estimator::TwoStateLate)
    }

    /// The labels a user may write, for messages.
    pub const VALID: &'static str =
        "plateau, plateau_tsep<N>, summation, two_state, two_state_late";
}

impl fmt::Display for Estimator {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Estimator::Plateau { tsep: None } => f.write_str("plateau"),
            Estimator::Plateau { tsep: Some(t) } => write!(f, "{PLATEAU_TSEP}{t}"),
            Estimator::Summation => f.write_str("summation"),
            Estimator::TwoState => f.write_str("two_state"),
            Estimator::TwoStateLate => f.write_str(TWO_STATE_LATE),
        }
    }
}

/// An unknown estimator label.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct UnknownEstimator(pub String);

impl fmt::Display for UnknownEstimator {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "`{}` is not an excited-state estimator: expected one of {}",
            self.0,
            Estimator::VALID
        )
    }
}

impl std::error::Error for UnknownEstimator {}

impl FromStr for Estimator {
    type Err = UnknownEstimator;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "plateau" | PLATEAU_LARGEST => Ok(Estimator::Plateau { tsep: None }),
            "summation" => Ok(Estimator::Summation),
            "two_state" => Ok(Estimator::TwoState),
            TWO_STATE_LATE => Ok(Estimator::TwoStateLate),
            _ => s
                .strip_prefix(PLATEAU_TSEP)
                .filter(|t| !t.is_empty() && t.bytes().all(|b| b.is_ascii_digit()))
                .and_then(|t| t.parse().ok())
                .map(Estimator::plateau_at)
                .ok_or_else(|| UnknownEstimator(s.to_string())),
        }
    }
}

impl Serialize for Estimator {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.collect_str(self)
    }
}

impl<'de> Deserialize<'de> for Estimator {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        let text = String::deserialize(deserializer)?;
        text.parse().map_err(serde::de::Error::custom)
    }
}

impl JsonSchema for Estimator {
    fn schema_name() -> String {
        "Estimator".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        let mut schema = SchemaObject {
            instance_type: Some(InstanceType::String.into()),
            string: Some(Box::new(StringValidation {
                pattern: Some(format!(
                    "^(plateau|{PLATEAU_TSEP}[0-9]+|summation|two_state|{TWO_STATE_LATE}|{PLATEAU_LARGEST})$"
                )),
                ..Default::default()
            })),
            ..Default::default()
        };
        schema.metadata().description = Some(
            "An excited-state estimator: `plateau` (every separation; as the final choice the \
             largest separation with a fit), `plateau_tsep<N>` (the plateau at tsep = N), \
             `summation`, `two_state`, `two_state_late` (the two-state fit without its \
             smallest separation; it runs with `two_state` when `two_state_late: true`)."
                .into(),
        );
        schema.into()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_round_trip_and_order() {
        let all = [
            Estimator::Plateau { tsep: None },
            Estimator::plateau_at(8),
            Estimator::plateau_at(10),
            Estimator::Summation,
            Estimator::TwoState,
            Estimator::TwoStateLate,
        ];
        for e in all {
            assert_eq!(e.to_string().parse::<Estimator>(), Ok(e));
            let yaml = serde_yaml_ng::to_string(&e).unwrap();
            assert_eq!(serde_yaml_ng::from_str::<Estimator>(&yaml).unwrap(), e);
        }
        assert!(all.windows(2).all(|w| w[0] < w[1]));
        assert_eq!(
            "plateau_largest_tsep".parse::<Estimator>(),
            Ok(Estimator::Plateau { tsep: None })
        );
        for bad in [
            "two-state",
            "TwoState",
            "plateau_tsep",
            "plateau_tsep-1",
            "",
        ] {
            assert!(bad.parse::<Estimator>().is_err(), "{bad}");
        }
    }

    #[test]
    fn plateau_selects_every_separation() {
        let any = Estimator::Plateau { tsep: None };
        assert!(any.selects(Estimator::plateau_at(12)));
        assert!(!Estimator::plateau_at(10).selects(Estimator::plateau_at(12)));
        assert!(!any.selects(Estimator::Summation));
        assert_eq!(Estimator::plateau_at(12).kind(), any);
    }
}

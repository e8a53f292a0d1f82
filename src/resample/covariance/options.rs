//! How a covariance is chosen in a pipeline file: `full`, `diagonal` or `shrinkage` (with
//! its target and intensity) and the eigenvalue cut, with the YAML forms they are read from
//! and written in.

use schemars::gen::SchemaGenerator;
use schemars::schema::{InstanceType, Schema, SchemaObject};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// What a shrinkage estimate shrinks toward.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum ShrinkageTarget {
    /// The diagonal of the covariance: the correlation matrix is shrunk toward the identity.
    #[default]
    Diagonal,
    /// The scaled identity `μ I`, `μ = tr(C)/d` (Ledoit & Wolf 2004 as published).
    Identity,
}

/// Which covariance to use. In YAML: `full`, `diagonal`, `shrinkage` (diagonal target,
/// Ledoit–Wolf intensity) or `{shrinkage: {target: identity, intensity: 0.3}}`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Deserialize)]
#[serde(try_from = "KindRepr")]
pub enum CovarianceKind {
    /// The full covariance of the resamples.
    #[default]
    Full,
    /// Only the variances (uncorrelated weights).
    Diagonal,
    /// Shrinkage toward `target`.
    Shrinkage {
        /// What to shrink toward.
        target: ShrinkageTarget,
        /// `None`: the Ledoit–Wolf optimal intensity; `Some(λ)`, `0 <= λ <= 1`: fixed.
        intensity: Option<f64>,
    },
}

/// The YAML forms of a covariance kind: a bare name, or `{shrinkage: {...}}`.
#[derive(Deserialize, JsonSchema)]
#[serde(untagged)]
enum KindRepr {
    /// `full`, `diagonal` or `shrinkage` (diagonal target, Ledoit–Wolf intensity).
    #[schemars(schema_with = "kind_name_schema")]
    Name(String),
    /// `{shrinkage: {target: diagonal|identity, intensity: 0..1}}`.
    Tagged(TaggedKind),
}

/// A kind with settings.
#[derive(Deserialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
enum TaggedKind {
    /// The full covariance.
    Full,
    /// Only the variances.
    Diagonal,
    /// Shrinkage with explicit settings.
    Shrinkage(ShrinkageSpec),
}

/// Settings of a shrinkage covariance.
#[derive(Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
struct ShrinkageSpec {
    /// What to shrink toward (default `diagonal`).
    #[serde(default)]
    target: ShrinkageTarget,
    /// Fixed intensity from 0 to 1; omit for the Ledoit–Wolf optimum.
    #[serde(default)]
    intensity: Option<f64>,
}

fn kind_name_schema(_: &mut SchemaGenerator) -> Schema {
    SchemaObject {
        instance_type: Some(InstanceType::String.into()),
        enum_values: Some(vec!["full".into(), "diagonal".into(), "shrinkage".into()]),
        ..Default::default()
    }
    .into()
}

/// Written in the form it is read: `full`, `diagonal`, `{shrinkage: {target, intensity}}`.
impl Serialize for CovarianceKind {
    fn serialize<S: serde::Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        use serde::ser::SerializeMap;
        match *self {
            CovarianceKind::Full => s.serialize_str("full"),
            CovarianceKind::Diagonal => s.serialize_str("diagonal"),
            CovarianceKind::Shrinkage { target, intensity } => {
                let mut m = s.serialize_map(Some(1))?;
                m.serialize_entry("shrinkage", &ShrinkageSpec { target, intensity })?;
                m.end()
            }
        }
    }
}

impl JsonSchema for CovarianceKind {
    fn schema_name() -> String {
        "CovarianceKind".to_string()
    }
    fn json_schema(gen: &mut SchemaGenerator) -> Schema {
        KindRepr::json_schema(gen)
    }
}

impl TryFrom<KindRepr> for CovarianceKind {
    type Error = String;
    fn try_from(r: KindRepr) -> std::result::Result<Self, String> {
        let shrink = |s: ShrinkageSpec| CovarianceKind::Shrinkage {
            target: s.target,
            intensity: s.intensity,
        };
        match r {
            KindRepr::Name(n) => match n.as_str() {
                "full" => Ok(CovarianceKind::Full),
                "diagonal" => Ok(CovarianceKind::Diagonal),
                "shrinkage" => Ok(shrink(ShrinkageSpec {
                    target: ShrinkageTarget::Diagonal,
                    intensity: None,
                })),
                other => Err(format!(
                    "unknown covariance kind `{other}`; expected `full`, `diagonal` or \
                     `shrinkage` (or `{{shrinkage: {{target: diagonal|identity, intensity: \
                     0..1}}}}`)"
                )),
            },
            KindRepr::Tagged(TaggedKind::Full) => Ok(CovarianceKind::Full),
            KindRepr::Tagged(TaggedKind::Diagonal) => Ok(CovarianceKind::Diagonal),
            KindRepr::Tagged(TaggedKind::Shrinkage(s)) => Ok(shrink(s)),
        }
    }
}

/// How to estimate a covariance (a pipeline YAML block).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct CovarianceOptions {
    /// Full, diagonal or shrinkage.
    pub kind: CovarianceKind,
    /// Raise correlation-matrix eigenvalues below `eigen_cut * λ_max` to that floor.
    pub eigen_cut: Option<f64>,
}

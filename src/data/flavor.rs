//! Flavour combinations of three-point data, formed per configuration before the ratio
//! (docs/methods.md §5): isovector `u - d` (disconnected parts cancel in the isospin limit),
//! isoscalar `u + d` (needs connected and disconnected diagrams), or any weighted sum.

use super::{Diagram, Series, ThreePointData, ThreePointKey};
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, BTreeSet};

/// One term of a flavour combination: `weight` times the channels labelled `flavor` (and
/// `diagram`, when the data carry a diagram column).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct FlavorTerm {
    /// Flavour label as in the data (`u`, `d`, ...).
    pub flavor: String,
    /// Diagram label (`connected` / `disconnected`); absent for data without diagram column.
    #[serde(default)]
    pub diagram: Option<Diagram>,
    /// Multiplier.
    pub weight: f64,
}

/// A named flavour combination: the output channels carry `label` as flavour, no diagram.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct FlavorCombo {
    /// Flavour label of the combined channels (e.g. `u-d`).
    pub label: String,
    /// The terms summed.
    pub terms: Vec<FlavorTerm>,
}

impl FlavorCombo {
    /// Isovector `u - d` from the given diagram (`None` for data without diagram column).
    pub fn isovector(diagram: Option<Diagram>) -> Self {
        FlavorCombo {
            label: "u-d".into(),
            terms: vec![term("u", diagram, 1.0), term("d", diagram, -1.0)],
        }
    }

    /// Isoscalar `u + d`, connected plus disconnected diagrams.
    pub fn isoscalar() -> Self {
        let mut terms = Vec::new();
        for f in ["u", "d"] {
            for d in [Diagram::Connected, Diagram::Disconnected] {
                terms.push(term(f, Some(d), 1.0));
            }
        }
        FlavorCombo {
            label: "u+d".into(),
            terms,
        }
    }
}

fn term(flavor: &str, diagram: Option<Diagram>, weight: f64) -> FlavorTerm {
    FlavorTerm {
        flavor: flavor.into(),
        diagram,
        weight,
    }
}

/// Form the combined channels per configuration. For every channel (tsep, momenta, current,
/// projector) that carries at least one term of a combination, all its terms must be present
/// with equal shapes; the output holds only the combined channels.
pub fn combine(data: &ThreePointData, combos: &[FlavorCombo]) -> Result<ThreePointData> {
    let bases: BTreeSet<ThreePointKey> = data.channels.keys().map(base).collect();
    let mut out = ThreePointData {
        configs: data.configs.clone(),
        channels: BTreeMap::new(),
    };
    for combo in combos {
        if combo.terms.is_empty() {
            return Err(Error::config(format!(
                "flavour combination `{}` has no terms",
                combo.label
            )));
        }
        for b in &bases {
            let found: Vec<Option<&Series>> = combo
                .terms
                .iter()
                .map(|t| {
                    let key = ThreePointKey {
                        flavor: Some(t.flavor.clone()),
                        diagram: t.diagram,
                        ..b.clone()
                    };
                    data.channels.get(&key)
                })
                .collect();
            if found.iter().all(Option::is_none) {
                continue;
            }
            let mut sum: Option<Series> = None;
            for (t, s) in combo.terms.iter().zip(found) {
                let s = s.ok_or_else(|| {
                    Error::analysis(
                        "kinematics",
                        format!(
                            "flavour combination `{}`: channel tsep={} pf={} q={} {} {} has no data for flavour `{}`{}",
                            combo.label,
                            b.tsep,
                            super::momentum_text(b.pf),
                            super::momentum_text(b.q),
                            b.current,
                            b.projector,
                            t.flavor,
                            t.diagram.map(|d| format!(" ({d:?} diagram)")).unwrap_or_default()
                        ),
                    )
                })?;
                let acc = sum.get_or_insert_with(|| Series::zeros(s.n_t, s.n_cfg));
                if acc.n_t != s.n_t || acc.n_cfg != s.n_cfg {
                    return Err(Error::analysis(
                        "kinematics",
                        format!(
                            "flavour combination `{}`: flavour `{}` of channel tsep={} pf={} q={} {} {} has {}x{} values, other terms {}x{}",
                            combo.label, t.flavor, b.tsep, super::momentum_text(b.pf), super::momentum_text(b.q), b.current, b.projector, s.n_t, s.n_cfg, acc.n_t, acc.n_cfg
                        ),
                    ));
                }
                for (a, v) in acc.re.iter_mut().zip(&s.re) {
                    *a += t.weight * v;
                }
                for (a, v) in acc.im.iter_mut().zip(&s.im) {
                    *a += t.weight * v;
                }
            }
            if let Some(s) = sum {
                let key = ThreePointKey {
                    flavor: Some(combo.label.clone()),
                    ..b.clone()
                };
                out.channels.insert(key, s);
            }
        }
    }
    Ok(out)
}

/// The channel key without flavour and diagram.
fn base(key: &ThreePointKey) -> ThreePointKey {
    ThreePointKey {
        flavor: None,
        diagram: None,
        ..key.clone()
    }
}

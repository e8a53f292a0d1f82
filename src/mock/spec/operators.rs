//! The `operators` block of a mock spec: an operator basis, each operator with its overlaps,
//! and the check that the basis can separate the states. The correlators it implies are
//! computed in `mock/operators.rs`.

use super::fields::Correlation;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// One interpolating operator of the basis.
#[derive(Clone, Debug, PartialEq, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OperatorSpec {
    /// Label written to the `sink_op` / `source_op` columns.
    pub name: String,
    /// Overlap `Z_{a,n}(0)` with each state at rest, ground first (one per state, any sign).
    pub overlaps: Vec<f64>,
}

/// A basis of operators (the `operators` block of a mock spec).
#[derive(Clone, Debug, PartialEq, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct BasisSpec {
    /// The operators (two to four), each with its overlaps.
    pub basis: Vec<OperatorSpec>,
    /// Correlation of the noise between the elements of one correlator matrix (default
    /// 0.8): each element's noise is this share of a common part plus its own part.
    #[serde(default = "default_correlation")]
    pub noise_correlation: Correlation,
}

fn default_correlation() -> Correlation {
    Correlation(0.8)
}

impl BasisSpec {
    /// Check the basis against the number of states; the message names the key.
    pub fn validate(&self, n_states: usize) -> Result<(), String> {
        if !(2..=4).contains(&self.basis.len()) {
            return Err(format!(
                "operators.basis: expected 2 to 4 operators, found {}",
                self.basis.len()
            ));
        }
        for (i, o) in self.basis.iter().enumerate() {
            if o.name.is_empty() || o.name.contains(|c: char| c == ',' || c.is_control()) {
                return Err(format!(
                    "operators.basis[{i}].name: `{}` is not a label (non-empty, no commas)",
                    crate::error::printable(&o.name)
                ));
            }
            if self.basis[..i].iter().any(|p| p.name == o.name) {
                return Err(format!(
                    "operators.basis[{i}].name: `{}` is named twice",
                    o.name
                ));
            }
            if o.overlaps.len() != n_states || o.overlaps.iter().any(|z| !z.is_finite()) {
                return Err(format!(
                    "operators.basis[{i}].overlaps: expected {n_states} finite numbers (one per \
                     state of hadron.states), found {:?}",
                    o.overlaps
                ));
            }
        }
        // The overlap matrix must have full rank for the GEVP to separate the states it spans.
        let n = self.basis.len().min(n_states);
        let z = nalgebra::DMatrix::from_fn(self.basis.len(), n_states, |a, k| {
            self.basis[a].overlaps[k]
        });
        let sv = z.singular_values();
        let (max, min) = (
            sv.max(),
            sv.iter().take(n).cloned().fold(f64::INFINITY, f64::min),
        );
        if min.is_nan() || min <= 1e-8 * max {
            return Err(
                "operators.basis: the overlap matrix is (nearly) singular: the operators do not \
                 distinguish the states"
                    .into(),
            );
        }
        Ok(())
    }
}

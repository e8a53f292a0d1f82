//! The decomposition's settings in the pipeline file: the energies of the kinematic factors,
//! the weights, the Q² tolerance of a shell with twisted boundary conditions, and the phase
//! convention per current.

use crate::data::Current;
use crate::fit::Weighting;
use crate::kinematics::phase::Phase;
use crate::kinematics::setup::EnergySource;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// User settings of the decomposition.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DecompositionSettings {
    /// Energies of the kinematic factors: `fitted` (the two-point fit at every momentum;
    /// `fit` is read too), or the fitted mass with the `continuum` or `lattice` dispersion
    /// relation.
    #[serde(default)]
    pub energies: EnergySource,
    /// Weights of the least-squares solve.
    #[serde(default)]
    pub weights: Weighting,
    /// With twisted boundary conditions: channels whose Q² (lattice units, central value)
    /// differ by at most this much form one shell.
    #[serde(default = "default_q2_tolerance")]
    pub q2_tolerance: f64,
    /// Phase convention per current (`V1`, ..., `T34`): a complex unit (`1`, `-1`, `i`, `-i`)
    /// multiplying that current's data. Currents not listed keep phase 1.
    #[serde(default)]
    pub phases: BTreeMap<String, Phase>,
}

fn default_q2_tolerance() -> f64 {
    1e-6
}

impl DecompositionSettings {
    /// Check the tolerance and the current names of the phases.
    pub fn validate(&self) -> std::result::Result<(), crate::Invalid> {
        if !(self.q2_tolerance.is_finite() && self.q2_tolerance >= 0.0) {
            return Err(crate::Invalid::new(
                "q2_tolerance",
                format!(
                    "q2_tolerance = {} is not valid: expected zero or a positive number",
                    self.q2_tolerance
                ),
            ));
        }
        for name in self.phases.keys() {
            if Current::parse(name).is_none() {
                return Err(crate::Invalid::new(
                    format!("phases.{name}"),
                    Current::unknown(name),
                ));
            }
        }
        Ok(())
    }
}

impl Default for DecompositionSettings {
    fn default() -> Self {
        DecompositionSettings {
            energies: EnergySource::default(),
            weights: Weighting::default(),
            q2_tolerance: default_q2_tolerance(),
            phases: BTreeMap::new(),
        }
    }
}

//! Renormalization (docs/methods.md §4), applied to the form factors after the decomposition:
//! the bare value times a user-supplied `Z ± dZ` per
//! current kind (e.g. `Z_V`, `Z_A`). The `Z` error does not come from the ensemble, so it is
//! kept as its own error column and combined with the statistical error in quadrature:
//! `sigma_stat = |Z| sigma(bare)`, `sigma_Z = |bare| dZ`, `sigma_total = sqrt(sigma_stat^2 + sigma_Z^2)`.

use crate::data::CurrentKind;
use crate::resample::Resampled;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// A renormalization constant with its uncertainty.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ZFactor {
    /// The constant `Z`.
    pub value: f64,
    /// Its uncertainty `dZ` (non-negative).
    #[serde(default)]
    pub error: f64,
}

impl ZFactor {
    /// `Z = 1` exactly: no renormalization.
    pub const ONE: ZFactor = ZFactor {
        value: 1.0,
        error: 0.0,
    };
}

/// Renormalization constants per current kind; a kind without one is left bare (`Z = 1`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(default, deny_unknown_fields)]
pub struct ZFactors {
    /// `Z_V` for the vector current.
    pub vector: Option<ZFactor>,
    /// `Z_A` for the axial current.
    pub axial: Option<ZFactor>,
    /// `Z_S` for the scalar density.
    pub scalar: Option<ZFactor>,
    /// `Z_P` for the pseudoscalar density.
    pub pseudoscalar: Option<ZFactor>,
    /// `Z_T` for the tensor current.
    pub tensor: Option<ZFactor>,
}

impl ZFactors {
    /// Check every constant: `Z` positive and finite, `dZ` zero or positive.
    pub fn validate(&self) -> Result<(), crate::Invalid> {
        for (name, f) in [
            ("vector", self.vector),
            ("axial", self.axial),
            ("scalar", self.scalar),
            ("pseudoscalar", self.pseudoscalar),
            ("tensor", self.tensor),
        ] {
            let Some(f) = f else { continue };
            if !(f.value.is_finite() && f.value > 0.0) {
                return Err(crate::Invalid::new(
                    format!("{name}.value"),
                    format!("Z = {} is not valid: expected a positive number", f.value),
                ));
            }
            if !(f.error.is_finite() && f.error >= 0.0) {
                return Err(crate::Invalid::new(
                    format!("{name}.error"),
                    format!(
                        "dZ = {} is not valid: expected zero or a positive number",
                        f.error
                    ),
                ));
            }
        }
        Ok(())
    }

    /// The constant for `kind` (`Z = 1` when none was given).
    pub fn get(&self, kind: CurrentKind) -> ZFactor {
        match kind {
            CurrentKind::Vector => self.vector,
            CurrentKind::Axial => self.axial,
            CurrentKind::Scalar => self.scalar,
            CurrentKind::Pseudoscalar => self.pseudoscalar,
            CurrentKind::Tensor => self.tensor,
        }
        .unwrap_or(ZFactor::ONE)
    }
}

/// A renormalized real quantity with its error budget.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Renormalized {
    /// `Z * bare`, per resample (`Z` at its central value on every sample).
    pub value: Resampled,
    /// Statistical error `|Z| sigma(bare)`.
    pub error_stat: f64,
    /// Error from `dZ`: `|bare central| dZ`.
    pub error_z: f64,
    /// `sqrt(error_stat^2 + error_z^2)`.
    pub error_total: f64,
}

/// Renormalize one real quantity.
pub fn renormalize(bare: &Resampled, z: ZFactor) -> Renormalized {
    let value = bare * z.value;
    let error_stat = value.error();
    let error_z = bare.central.abs() * z.error.abs();
    Renormalized {
        value,
        error_stat,
        error_z,
        error_total: error_stat.hypot(error_z),
    }
}

//! The truth file of a mock ensemble (`truth.yaml`): everything the data were made from, plus
//! the true form factors and matrix elements at every generated channel, so a closure test can
//! compare a pipeline's output with it directly.

use super::spec::{FormFactorSpec, NoiseSpec, TransitionSpec};
use crate::data::{Current, Momentum, Projector};
use crate::kinematics::{Dispersion, Hadron};
use crate::{Error, Result};
use nalgebra::Complex;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;

/// Everything a mock ensemble was generated from (lattice units unless a name says otherwise).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Truth {
    /// The program that wrote the file.
    pub generator: String,
    /// Seed of the random streams.
    pub seed: u64,
    /// Lattice geometry.
    pub lattice: TruthLattice,
    /// Configuration numbering.
    pub configs: TruthConfigs,
    /// The hadron.
    pub hadron: TruthHadron,
    /// Energies, overlaps and two-point amplitudes at every two-point momentum.
    pub spectrum: Vec<TruthLevels>,
    /// The form-factor models, as given in the spec.
    pub form_factors: FormFactorSpec,
    /// Excited-state transition strengths relative to the ground-state matrix element.
    pub transitions: TransitionSpec,
    /// True form factors at every generated `(p_f, q)`.
    pub points: Vec<TruthPoint>,
    /// True ground-state matrix elements `Pi` of every generated channel (the large-time
    /// limit of the ratio), with their kinematic factors.
    pub matrix_elements: Vec<TruthMatrixElement>,
    /// Noise and autocorrelation settings.
    pub noise: NoiseSpec,
    /// The operator basis, when the ensemble has one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub operators: Option<super::spec::BasisSpec>,
}

/// Lattice geometry.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthLattice {
    /// Spatial extent.
    #[serde(rename = "L")]
    pub l: usize,
    /// Time extent.
    #[serde(rename = "T")]
    pub t: usize,
    /// Twist angles of the sink momenta (radians; absent when zero).
    #[serde(default, skip_serializing_if = "is_untwisted")]
    pub twist_sink: [f64; 3],
    /// Twist angles of the source momenta (radians; absent when zero).
    #[serde(default, skip_serializing_if = "is_untwisted")]
    pub twist_source: [f64; 3],
    /// Lattice spacing in fm.
    pub a_fm: f64,
}

fn is_untwisted(twist: &[f64; 3]) -> bool {
    twist.iter().all(|t| *t == 0.0)
}

/// Configuration numbering: `first, first + step, ...`, `count` of them.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthConfigs {
    /// Number of configurations.
    pub count: usize,
    /// First configuration number.
    pub first: i64,
    /// Step between numbers.
    pub step: i64,
}

/// The hadron.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthHadron {
    /// `spin1half` or `spin0`.
    pub kind: Hadron,
    /// Dispersion relation of the energies.
    pub dispersion: Dispersion,
    /// State masses, ground first.
    pub masses: Vec<f64>,
    /// Overlaps `Z_n(0)` at rest.
    pub overlaps_at_rest: Vec<f64>,
    /// Smearing width of the overlaps' momentum fall-off.
    pub smearing_width: f64,
    /// Pion mass, if given.
    pub m_pi: Option<f64>,
    /// Periodic symmetric two-point form (spin 0).
    pub periodic: bool,
}

/// The spectrum at one momentum.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthLevels {
    /// Integer momentum.
    pub momentum: Momentum,
    /// Lattice momentum `(2 pi n + theta) / L` (with the twist of the side it is used on).
    pub p: [f64; 3],
    /// `E_n(p)`, ground first.
    pub energies: Vec<f64>,
    /// `Z_n(p)`.
    pub overlaps: Vec<f64>,
    /// `A_n(p) = Z_n(p)^2`, the two-point amplitudes.
    pub amplitudes: Vec<f64>,
}

/// True form factors at one `(p_f, q)`.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthPoint {
    /// Sink momentum.
    pub pf: Momentum,
    /// Injected momentum.
    pub q: Momentum,
    /// Source momentum `p_f - q`.
    pub pi: Momentum,
    /// `Q^2` in lattice units (ground-state energies).
    pub q2: f64,
    /// `Q^2` in GeV^2.
    pub q2_gev2: f64,
    /// Form-factor values by name (`GE`, `GM`, `GA`, `GP`, ..., `F`).
    pub form_factors: BTreeMap<String, f64>,
}

/// The true matrix element of one channel (independent of `tsep`).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TruthMatrixElement {
    /// Sink momentum.
    pub pf: Momentum,
    /// Injected momentum.
    pub q: Momentum,
    /// Current name (`V4`, `A3`, ...).
    pub current: String,
    /// Projector name (`unpol`, `pol3`, `none`, ...).
    pub projector: String,
    /// Real part of `Pi`.
    pub re: f64,
    /// Imaginary part of `Pi`.
    pub im: f64,
    /// Kinematic factors `K_k` by form-factor name, as `[re, im]`.
    pub kinematic_factors: BTreeMap<String, [f64; 2]>,
}

impl Truth {
    /// Read `truth.yaml` back.
    pub fn read(path: &Path) -> Result<Truth> {
        let text = std::fs::read_to_string(path).map_err(|e| Error::io(path, e))?;
        serde_yaml_ng::from_str(&text)
            .map_err(|e| Error::config(format!("truth file {}: {e}", path.display())))
    }

    /// The truth as YAML text.
    pub fn to_yaml(&self) -> Result<String> {
        serde_yaml_ng::to_string(self)
            .map_err(|e| Error::config(format!("cannot write the truth file: {e}")))
    }

    /// The true matrix element `Pi` of a channel, if it was generated.
    pub fn matrix_element(
        &self,
        pf: Momentum,
        q: Momentum,
        current: Current,
        projector: Projector,
    ) -> Option<Complex<f64>> {
        self.matrix_elements
            .iter()
            .find(|m| {
                m.pf == pf
                    && m.q == q
                    && m.current == current.name()
                    && m.projector == projector.name()
            })
            .map(|m| Complex::new(m.re, m.im))
    }

    /// The true value of form factor `name` (`GE`, `F`, ...) at `(p_f, q)`, with its `Q^2`.
    pub fn form_factor(&self, pf: Momentum, q: Momentum, name: &str) -> Option<(f64, f64)> {
        let point = self.points.iter().find(|p| p.pf == pf && p.q == q)?;
        point.form_factors.get(name).map(|v| (point.q2, *v))
    }

    /// The spectrum at integer momentum `n`, if it was generated.
    pub fn levels(&self, n: Momentum) -> Option<&TruthLevels> {
        self.spectrum.iter().find(|s| s.momentum == n)
    }
}

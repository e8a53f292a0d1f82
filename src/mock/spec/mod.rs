//! The mock-ensemble specification: plain serde structs read from YAML.
//!
//! Range rules that concern one value (a positive mass, one to three states, a correlation
//! coefficient inside (-1, 1), a known current name) are checked while the YAML is read, so
//! the error carries the YAML line and column. Rules that tie several keys together (enough
//! form factors for the chosen currents, `tsep < T`, one transition strength per excited
//! state) are checked by [`MockSpec::validate`], whose errors name the dotted key.

mod fields;
mod operators;
mod validate;

pub use fields::{Correlation, NonNegative, Positive};
pub use operators::{BasisSpec, OperatorSpec};

use crate::data::{Current, CurrentKind, Momentum, Projector};
use crate::kinematics::{Dispersion, Hadron};
use crate::{Error, Result};
use schemars::JsonSchema;
use serde::{Deserialize, Deserializer, Serialize};
use std::collections::BTreeMap;

/// A whole mock-ensemble specification (`formfactory mock SPEC.yaml`).
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MockSpec {
    /// Seed of the random streams; the same seed gives byte-identical files.
    #[serde(deserialize_with = "crate::io::seed::seed")]
    pub seed: u64,
    /// Lattice size, spacing and configurations.
    pub ensemble: EnsembleSpec,
    /// The hadron: spin, dispersion relation and its states.
    pub hadron: HadronSpec,
    /// Form-factor models of the ground-to-ground matrix element, by form factor.
    pub form_factors: FormFactorSpec,
    /// Excited-state transition strengths relative to the ground-state matrix element (not
    /// used by the charge `V4` at `q = 0`, which current conservation makes diagonal with
    /// strength 1 in every state).
    #[serde(default)]
    pub transitions: TransitionSpec,
    /// Which two- and three-point channels to write.
    pub channels: ChannelSpec,
    /// Noise and autocorrelation; everything off when absent.
    #[serde(default)]
    pub noise: NoiseSpec,
    /// Output options.
    #[serde(default)]
    pub output: OutputSpec,
    /// An operator basis: when given, the two-point functions are written as a matrix
    /// between the operators and the three-point functions between every sink and source
    /// operator (columns `sink_op`, `source_op`); the hadron's own `overlap`s then only set
    /// the single-operator noise scale and the truth file.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub operators: Option<BasisSpec>,
}

/// Lattice geometry and configurations.
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct EnsembleSpec {
    /// Spatial extent in lattice units.
    #[serde(rename = "L", deserialize_with = "fields::positive_usize")]
    pub l: usize,
    /// Time extent in lattice units.
    #[serde(rename = "T", deserialize_with = "fields::positive_usize")]
    pub t: usize,
    /// Lattice spacing in fm (used only to quote physical units in the truth file).
    pub a_fm: Positive,
    /// Number of configurations to generate.
    #[serde(deserialize_with = "fields::positive_usize")]
    pub configs: usize,
    /// Number of the first configuration (default 1).
    #[serde(default = "fields::one")]
    pub first_config: i64,
    /// Step between configuration numbers (default 1).
    #[serde(default = "fields::one", deserialize_with = "fields::positive_i64")]
    pub config_step: i64,
    /// Twist angles `theta` (radians, per direction) of the sink momentum: twisted boundary
    /// conditions, momenta `p = (2 pi n + theta) / L` (docs/methods.md §1). The two-point
    /// function at a sink momentum carries this twist.
    #[serde(default)]
    pub twist_sink: [f64; 3],
    /// Twist angles `theta` (radians, per direction) of the source momentum. A momentum used
    /// at both sink and source needs equal twists (the two-point table holds one function per
    /// momentum).
    #[serde(default)]
    pub twist_source: [f64; 3],
}

/// The hadron and its spectrum.
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct HadronSpec {
    /// `spin1half` (nucleon-like: projectors `unpol`, `pol1`..`pol3`) or `spin0` (pion-like:
    /// projector `none`, vector current only).
    pub kind: Hadron,
    /// `continuum` (`E^2 = m^2 + p^2`) or `lattice` (`sinh^2(E/2) = sinh^2(m/2) + sum_i sin^2(p_i/2)`).
    pub dispersion: Dispersion,
    /// Ground state first, then one or two excited states (masses strictly increasing).
    #[serde(deserialize_with = "states")]
    #[schemars(length(min = 1, max = 3))]
    pub states: Vec<StateSpec>,
    /// Pion mass in lattice units: sets the nucleon noise growth and the pion pole of `G_P`.
    #[serde(default)]
    pub m_pi: Option<Positive>,
    /// Smearing width `w` (lattice units): overlaps fall as `Z_n(p) = Z_n(0) exp(-|p|^2 w^2 / 4)`.
    #[serde(default)]
    pub smearing_width: NonNegative,
    /// Spin 0 only: the periodic symmetric two-point form `A (e^{-E t} + e^{-E (T - t)})`.
    #[serde(default)]
    pub periodic: bool,
}

/// One state of the spectrum.
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct StateSpec {
    /// Mass in lattice units.
    pub mass: Positive,
    /// Overlap `Z_n(0)` at zero momentum; the two-point amplitude is `A_n(p) = Z_n(p)^2`.
    pub overlap: Positive,
}

/// Models of the ground-state form factors; which ones are needed follows from the currents.
#[derive(Clone, Debug, PartialEq, Default, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
#[allow(non_snake_case)]
pub struct FormFactorSpec {
    /// Sachs electric form factor (vector current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub GE: Option<FormFactorModel>,
    /// Sachs magnetic form factor (vector current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub GM: Option<FormFactorModel>,
    /// Axial form factor (axial current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub GA: Option<FormFactorModel>,
    /// Induced pseudoscalar form factor (axial current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub GP: Option<FormFactorModel>,
    /// Scalar form factor (scalar current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub GS: Option<FormFactorModel>,
    /// Pseudoscalar form factor (pseudoscalar current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub G5: Option<FormFactorModel>,
    /// Tensor form factor (tensor current, spin 1/2).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub GT: Option<FormFactorModel>,
    /// Vector form factor of a spin-0 hadron.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub F: Option<FormFactorModel>,
}

impl FormFactorSpec {
    /// The models given, by form-factor name (`GE`, ..., `F`).
    pub fn by_name(&self) -> BTreeMap<&'static str, &FormFactorModel> {
        [
            ("GE", &self.GE),
            ("GM", &self.GM),
            ("GA", &self.GA),
            ("GP", &self.GP),
            ("GS", &self.GS),
            ("G5", &self.G5),
            ("GT", &self.GT),
            ("F", &self.F),
        ]
        .into_iter()
        .filter_map(|(n, m)| m.as_ref().map(|m| (n, m)))
        .collect()
    }
}

/// A model of one form factor as a function of `Q^2` (lattice units throughout).
#[derive(Clone, Debug, PartialEq, Deserialize, Serialize, JsonSchema)]
#[serde(tag = "model", rename_all = "snake_case", deny_unknown_fields)]
pub enum FormFactorModel {
    /// `G(Q^2) = value_at_zero / (1 + Q^2 / mass^2)^2`.
    Dipole {
        /// `G(0)`.
        value_at_zero: f64,
        /// Dipole mass (lattice units).
        mass: Positive,
    },
    /// `G = sum_k a_k z^k`, `z = (sqrt(t_cut + Q^2) - sqrt(t_cut - t0)) / (sqrt(t_cut + Q^2) + sqrt(t_cut - t0))`.
    ZExpansion {
        /// Threshold `t_cut` (lattice units), e.g. `4 m_pi^2` for the isovector vector current.
        t_cut: Positive,
        /// Expansion point `t0 < t_cut` (default 0).
        #[serde(default)]
        t0: f64,
        /// Coefficients `a_0, a_1, ...`.
        coefficients: Vec<f64>,
    },
    /// Pion-pole dominance for `G_P` only: `G_P = 4 m^2 G_A / (Q^2 + m_pi^2)` (needs `GA` and `m_pi`).
    PionPole,
}

/// Relative strengths of excited-state transitions, per current kind (`default` for the rest).
#[derive(Clone, Debug, PartialEq, Default, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct TransitionSpec {
    /// Used for every current kind not listed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub default: Option<Transitions>,
    /// Vector currents.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub vector: Option<Transitions>,
    /// Axial currents.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub axial: Option<Transitions>,
    /// Scalar current.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub scalar: Option<Transitions>,
    /// Pseudoscalar current.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pseudoscalar: Option<Transitions>,
    /// Tensor currents.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tensor: Option<Transitions>,
}

impl TransitionSpec {
    /// The strengths for a current kind (falling back to `default`), if any were given.
    pub fn for_kind(&self, kind: CurrentKind) -> Option<&Transitions> {
        let own = match kind {
            CurrentKind::Vector => &self.vector,
            CurrentKind::Axial => &self.axial,
            CurrentKind::Scalar => &self.scalar,
            CurrentKind::Pseudoscalar => &self.pseudoscalar,
            CurrentKind::Tensor => &self.tensor,
        };
        own.as_ref().or(self.default.as_ref())
    }

    fn all(&self) -> [(&'static str, &Option<Transitions>); 6] {
        [
            ("default", &self.default),
            ("vector", &self.vector),
            ("axial", &self.axial),
            ("scalar", &self.scalar),
            ("pseudoscalar", &self.pseudoscalar),
            ("tensor", &self.tensor),
        ]
    }
}

/// Transition matrix elements relative to the ground-to-ground one. State `n >= 1` counts the
/// excited states; "source" is the state created at time 0 (momentum `p_i`), "sink" the one
/// annihilated at `tsep` (momentum `p_f`).
#[derive(Clone, Debug, PartialEq, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Transitions {
    /// `r_{0n}`: ground state at the sink, excited state `n` at the source (one per excited state).
    pub source_excited: Vec<f64>,
    /// `r_{m0}`: excited state `m` at the sink, ground at the source (default: `source_excited`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sink_excited: Option<Vec<f64>>,
    /// `r_{mn}`: both excited, row `m` = sink state, column `n` = source state.
    #[serde(default)]
    pub both_excited: Vec<Vec<f64>>,
}

impl Transitions {
    /// The full `(n_states x n_states)` matrix `r[m][n]` (sink `m`, source `n`), `r[0][0] = 1`.
    pub fn matrix(&self, n_states: usize) -> Vec<Vec<f64>> {
        let sink = self.sink_excited.as_ref().unwrap_or(&self.source_excited);
        let get = |v: &[f64], n: usize| v.get(n - 1).copied().unwrap_or(0.0);
        (0..n_states)
            .map(|m| {
                (0..n_states)
                    .map(|n| match (m, n) {
                        (0, 0) => 1.0,
                        (0, n) => get(&self.source_excited, n),
                        (m, 0) => get(sink, m),
                        (m, n) => self.both_excited.get(m - 1).map_or(0.0, |row| get(row, n)),
                    })
                    .collect()
            })
            .collect()
    }
}

/// Which channels to generate.
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ChannelSpec {
    /// Sink momenta and injected momenta.
    pub momenta: MomentumSelection,
    /// Source–sink separations of the three-point functions.
    pub tseps: Vec<u32>,
    /// Groups of currents, each with the projectors to combine them with (every current of a
    /// group with every projector of the group).
    pub insertions: Vec<Insertion>,
    /// Leave out channels whose kinematic factors all vanish (default true).
    #[serde(default = "fields::yes")]
    pub skip_vanishing: bool,
}

impl ChannelSpec {
    /// Every `(current, projector)` combination of the insertion groups, without repeats, in
    /// the order given (`none` is the projector of a group that lists none).
    pub fn combinations(&self) -> Vec<(Current, Projector)> {
        let mut out = Vec::new();
        for g in &self.insertions {
            let projectors: &[Projector] = if g.projectors.is_empty() {
                &[Projector::None]
            } else {
                &g.projectors
            };
            for &c in &g.currents {
                for &p in projectors {
                    if !out.contains(&(c, p)) {
                        out.push((c, p));
                    }
                }
            }
        }
        out
    }
}

/// A group of currents and the projectors they are combined with.
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Insertion {
    /// Currents (`V1`..`V4`, `A1`..`A4`, `S`, `P`, `T12`..`T34`).
    #[serde(
        deserialize_with = "fields::currents",
        serialize_with = "fields::current_names"
    )]
    #[schemars(with = "Vec<String>")]
    pub currents: Vec<Current>,
    /// Projectors (`unpol`, `pol1`..`pol3` for spin 1/2; for spin 0 leave out, or `none`).
    #[serde(
        default,
        deserialize_with = "fields::projectors",
        serialize_with = "fields::projector_names"
    )]
    #[schemars(with = "Vec<String>")]
    pub projectors: Vec<Projector>,
}

/// The three-point momenta: explicit `(p_f, q)` pairs, and/or every `q` up to a shell for each
/// sink momentum.
#[derive(Clone, Debug, Default, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MomentumSelection {
    /// Explicit `(p_f, q)` pairs.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub pairs: Vec<MomentumPair>,
    /// Sink momenta `p_f` for which every `q` with `|n_q|^2 <= max_q2` is generated.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub sink: Vec<Momentum>,
    /// Largest `|n_q|^2` (with `sink`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_q2: Option<u32>,
    /// With `sink`: keep one `q` per `(|n_q|^2, |n_i|^2)` shell and sink momentum (default true).
    #[serde(default = "fields::yes")]
    pub representatives: bool,
}

/// One sink momentum and one injected momentum, in units of `2 pi / L`.
#[derive(Clone, Debug, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MomentumPair {
    /// Sink momentum `p_f`.
    pub pf: Momentum,
    /// Injected momentum `q`; the source momentum is `p_f - q`.
    pub q: Momentum,
}

/// Noise and autocorrelation. All sizes default to zero (exact means).
#[derive(Clone, Debug, PartialEq, Default, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct NoiseSpec {
    /// Noise-to-signal of the two-point function at `t = 0`.
    #[serde(default)]
    pub twopt: NonNegative,
    /// Noise of the three-point function in units of its ground-state envelope
    /// `sqrt(A_0(p_f) A_0(p_i)) e^{-E_f (tsep - tau) - E_i tau}`, at `tsep = 0`.
    #[serde(default)]
    pub threept: NonNegative,
    /// Growth rate `g(p)` of the noise-to-signal, `e^{g t}`. Default: `E_0(p) - 3 m_pi / 2`
    /// for spin 1/2 (needs `hadron.m_pi`), 0 for spin 0.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub growth_rate: Option<f64>,
    /// Correlation length `xi` across time slices: correlation `exp(-|t - t'| / xi)`; 0 = none.
    #[serde(default)]
    pub time_correlation: NonNegative,
    /// Correlation coefficient between a three-point function's noise and that of the
    /// two-point function `C2(tsep; p_f)` dividing it in the ratio.
    #[serde(default)]
    pub twopt_threept_correlation: Correlation,
    /// AR(1) coefficient `rho` in configuration order (lag-1 autocorrelation).
    #[serde(default)]
    pub autocorrelation: Correlation,
}

/// Output options.
#[derive(Clone, Debug, Default, Deserialize, Serialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct OutputSpec {
    /// Round every written value to this many significant digits (keeps files small);
    /// full precision when absent.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub significant_digits: Option<u32>,
}

fn states<'de, D: Deserializer<'de>>(d: D) -> std::result::Result<Vec<StateSpec>, D::Error> {
    let s = Vec::<StateSpec>::deserialize(d)?;
    if s.is_empty() || s.len() > 3 {
        return Err(serde::de::Error::custom(format!(
            "`states`: expected 1 to 3 states (ground and up to two excited), found {}",
            s.len()
        )));
    }
    if let Some(w) = s.windows(2).find(|w| w[1].mass.0 <= w[0].mass.0) {
        return Err(serde::de::Error::custom(format!(
            "`states`: masses must increase strictly (ground state first), found {} then {}",
            w[0].mass.0, w[1].mass.0
        )));
    }
    Ok(s)
}

impl MockSpec {
    /// Parse a spec from YAML text; `origin` (a file name) prefixes every error, which carries
    /// the YAML line and column, then the cross-key checks of [`MockSpec::validate`] run.
    pub fn from_yaml(text: &str, origin: &str) -> Result<MockSpec> {
        crate::pipeline::yaml::check_flow_depth(&format!("mock spec {origin}"), text)?;
        let spec: MockSpec = serde_yaml_ng::from_str(text).map_err(|e| {
            let text = e.to_string();
            match e.location() {
                Some(l) => {
                    let suffix = format!(" at line {} column {}", l.line(), l.column());
                    let message = text.strip_suffix(&suffix).unwrap_or(&text);
                    Error::config(format!(
                        "mock spec {origin}:{}:{}: {message}",
                        l.line(),
                        l.column()
                    ))
                }
                None => Error::config(format!("mock spec {origin}: {text}")),
            }
        })?;
        spec.validate()
            .map_err(|m| Error::config(format!("mock spec {origin}: {m}")))?;
        Ok(spec)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const GOOD: &str = "
seed: 5
ensemble: {L: 8, T: 16, a_fm: 0.1, configs: 4}
hadron:
  kind: spin1half
  dispersion: continuum
  m_pi: 0.2
  states:
    - {mass: 0.5, overlap: 1.0}
    - {mass: 0.9, overlap: 0.5}
form_factors:
  GE: {model: dipole, value_at_zero: 1.0, mass: 0.4}
  GM: {model: z_expansion, t_cut: 0.16, coefficients: [4.7, -1.0]}
  GA: {model: dipole, value_at_zero: 1.27, mass: 0.5}
  GP: {model: pion_pole}
channels:
  momenta: {sink: [[0, 0, 0]], max_q2: 2}
  tseps: [4, 6]
  insertions:
    - {currents: [V4, A3], projectors: [unpol, pol3]}
";

    fn parse(text: &str) -> std::result::Result<MockSpec, String> {
        MockSpec::from_yaml(text, "spec.yaml").map_err(|e| e.to_string())
    }

    // A valid spec survives a YAML round trip unchanged (the truth file echoes spec parts).
    #[test]
    fn round_trip() {
        let s = parse(GOOD).unwrap();
        let again = parse(&serde_yaml_ng::to_string(&s).unwrap()).unwrap();
        assert_eq!(
            serde_yaml_ng::to_string(&again).unwrap(),
            serde_yaml_ng::to_string(&s).unwrap()
        );
        assert_eq!(s.hadron.states.len(), 2);
        assert!(s.channels.skip_vanishing);
        assert_eq!(
            s.channels.combinations(),
            vec![
                (Current::V4, Projector::Unpol),
                (Current::V4, Projector::Pol(3)),
                (Current::A3, Projector::Unpol),
                (Current::A3, Projector::Pol(3))
            ]
        );
    }

    // Single-value errors carry file, line and column; cross-key errors name the key.
    #[test]
    fn errors_name_where() {
        let e = parse(&GOOD.replace("mass: 0.9", "mass: -0.9")).unwrap_err();
        assert!(
            e.starts_with("mock spec spec.yaml:10:7: hadron.states[1]"),
            "{e}"
        );
        assert!(e.contains("expected a positive number, found -0.9"), "{e}");
        let e = parse(&format!("{GOOD}noise: {{autocorrelation: 1.0}}\n")).unwrap_err();
        assert!(e.contains("strictly between -1 and 1"), "{e}");
        let e = parse(&GOOD.replace("  m_pi: 0.2\n", "")).unwrap_err();
        assert!(
            e.contains("form_factors.GP: pion_pole needs hadron.m_pi"),
            "{e}"
        );
        let two = "transitions: {axial: {source_excited: [0.1, 0.2]}}\n";
        let e = parse(&format!("{GOOD}{two}")).unwrap_err();
        assert!(
            e.contains("transitions.axial.source_excited: 2 entries for 1 excited"),
            "{e}"
        );
        let e = parse(&GOOD.replace("kind: spin1half", "kind: spin0")).unwrap_err();
        assert!(
            e.contains("channels.insertions[0].currents: A3 has no form factor for a spin-0"),
            "{e}"
        );
        let e = parse(&GOOD.replace("max_q2: 2", "representatives: true")).unwrap_err();
        assert!(
            e.contains("channels.momenta: `sink` and `max_q2` go together"),
            "{e}"
        );
    }

    // The JSON Schema of the spec exists and lists the top-level keys.
    #[test]
    fn schema_lists_keys() {
        let schema = serde_json::to_string(&schemars::schema_for!(MockSpec)).unwrap();
        for key in [
            "seed",
            "ensemble",
            "hadron",
            "form_factors",
            "channels",
            "noise",
        ] {
            assert!(schema.contains(&format!("\"{key}\"")), "{key}");
        }
    }
}

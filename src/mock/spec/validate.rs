//! The checks of a mock spec that tie several keys together (enough form factors for the
//! chosen currents, `tsep < T`, one transition strength per excited state, ...). Each error
//! names the dotted key and says what would be valid.

use super::{FormFactorModel, Insertion, MockSpec};
use crate::data::{CurrentKind, Projector};
use crate::kinematics::{FormFactor, Hadron};
use std::collections::BTreeMap;

type Checked = std::result::Result<(), String>;

impl MockSpec {
    /// Checks that tie several keys together; the message names the dotted key and says
    /// what would be valid.
    pub fn validate(&self) -> Checked {
        self.check_states()?;
        self.check_twists()?;
        self.check_channels()?;
        let given = self.form_factors.by_name();
        for (i, g) in self.channels.insertions.iter().enumerate() {
            self.check_insertion(i, g, &given)?;
        }
        self.check_models(&given)?;
        self.check_transitions()?;
        self.check_noise_and_output()
    }

    /// `ensemble.twist_sink` and `ensemble.twist_source`: finite angles.
    fn check_twists(&self) -> Checked {
        let e = &self.ensemble;
        for (key, twist) in [
            ("twist_sink", e.twist_sink),
            ("twist_source", e.twist_source),
        ] {
            if let Some(i) = twist.iter().position(|t| !t.is_finite()) {
                return Err(format!(
                    "ensemble.{key}[{i}]: twist angles must be finite numbers (radians)"
                ));
            }
        }
        Ok(())
    }

    /// `hadron.states`, the operator basis and the periodic form.
    fn check_states(&self) -> Checked {
        let n_states = self.hadron.states.len();
        // Also checked while reading YAML; repeated for specs built in code.
        if !(1..=3).contains(&n_states) {
            return Err(format!(
                "hadron.states: expected 1 to 3 states, found {n_states}"
            ));
        }
        let numbers = self
            .hadron
            .states
            .iter()
            .flat_map(|s| [s.mass.0, s.overlap.0]);
        if numbers.clone().any(|x| !(x.is_finite() && x > 0.0))
            || self
                .hadron
                .states
                .windows(2)
                .any(|w| w[1].mass.0 <= w[0].mass.0)
        {
            return Err(
                "hadron.states: masses and overlaps must be positive, masses strictly increasing"
                    .into(),
            );
        }
        if let Some(b) = &self.operators {
            b.validate(n_states)?;
            if self.hadron.periodic {
                return Err(
                    "operators: the operator basis is for the non-periodic form only".into(),
                );
            }
        }
        if self.hadron.periodic && self.hadron.kind == Hadron::Spin1Half {
            return Err("hadron.periodic: the periodic symmetric form is for spin 0 only".into());
        }
        Ok(())
    }

    /// `channels.momenta`, `channels.tseps` and that there are insertions at all.
    fn check_channels(&self) -> Checked {
        let ch = &self.channels;
        let m = &ch.momenta;
        if m.sink.is_empty() != m.max_q2.is_none() {
            return Err(
                "channels.momenta: `sink` and `max_q2` go together; give both or neither".into(),
            );
        }
        if m.pairs.is_empty() && m.sink.is_empty() {
            return Err("channels.momenta: give `pairs`, or `sink` with `max_q2`, or both".into());
        }
        if ch.tseps.is_empty() {
            return Err("channels.tseps: give at least one source–sink separation".into());
        }
        if let Some(&bad) = ch
            .tseps
            .iter()
            .find(|&&t| t < 2 || t as usize >= self.ensemble.t)
        {
            return Err(format!(
                "channels.tseps: {bad} is outside 2..{} (T = {})",
                self.ensemble.t, self.ensemble.t
            ));
        }
        if ch.insertions.is_empty() {
            return Err("channels.insertions: give at least one group of currents".into());
        }
        Ok(())
    }

    /// Insertion group `i`: currents and projectors that suit the hadron, and a model for
    /// every form factor its currents need.
    fn check_insertion(
        &self,
        i: usize,
        g: &Insertion,
        given: &BTreeMap<&'static str, &FormFactorModel>,
    ) -> Checked {
        let at = format!("channels.insertions[{i}]");
        if g.currents.is_empty() {
            return Err(format!("{at}.currents: give at least one current"));
        }
        let spin = self.hadron.kind;
        match spin {
            Hadron::Spin0 => {
                if let Some(c) = g.currents.iter().find(|c| c.kind() != CurrentKind::Vector) {
                    return Err(format!(
                        "{at}.currents: {c} has no form factor for a spin-0 hadron; use V1..V4"
                    ));
                }
                if g.projectors.iter().any(|&p| p != Projector::None) {
                    return Err(format!(
                        "{at}.projectors: a spin-0 hadron takes only `none` (or no projectors)"
                    ));
                }
            }
            Hadron::Spin1Half => {
                if g.projectors.is_empty() || g.projectors.contains(&Projector::None) {
                    return Err(format!(
                        "{at}.projectors: give projectors among unpol, pol1, pol2, pol3"
                    ));
                }
            }
        }
        for c in &g.currents {
            for need in FormFactor::of(spin, c.kind()).iter().map(|f| f.name()) {
                if !given.contains_key(need) {
                    return Err(format!(
                        "form_factors.{need}: current {c} needs a model for {need}"
                    ));
                }
            }
        }
        Ok(())
    }

    /// Each form-factor model on its own: pion pole for `GP` only and with what it needs,
    /// a z-expansion with `t0 < t_cut` and at least one coefficient.
    fn check_models(&self, given: &BTreeMap<&'static str, &FormFactorModel>) -> Checked {
        for (name, model) in given {
            match model {
                FormFactorModel::PionPole => {
                    if *name != "GP" {
                        return Err(format!(
                            "form_factors.{name}: pion_pole is a model for GP only"
                        ));
                    }
                    let has_ga = given
                        .get("GA")
                        .is_some_and(|m| **m != FormFactorModel::PionPole);
                    if self.hadron.m_pi.is_none() || !has_ga {
                        return Err(
                            "form_factors.GP: pion_pole needs hadron.m_pi and a model for GA"
                                .into(),
                        );
                    }
                }
                FormFactorModel::ZExpansion {
                    t_cut,
                    t0,
                    coefficients,
                } => {
                    if *t0 >= t_cut.0 {
                        return Err(format!(
                            "form_factors.{name}.z_expansion: t0 = {t0} must be below t_cut = {}",
                            t_cut.0
                        ));
                    }
                    if coefficients.is_empty() {
                        return Err(format!(
                            "form_factors.{name}.z_expansion.coefficients: give at least a_0"
                        ));
                    }
                }
                FormFactorModel::Dipole { .. } => {}
            }
        }
        Ok(())
    }

    /// One transition strength per excited state, and a square `both_excited` matrix.
    fn check_transitions(&self) -> Checked {
        let excited = self.hadron.states.len() - 1;
        for (kind, tr) in self.transitions.all() {
            let Some(tr) = tr else { continue };
            if tr.source_excited.len() != excited {
                return Err(format!(
                    "transitions.{kind}.source_excited: {} entries for {excited} excited state(s); give one per excited state",
                    tr.source_excited.len()
                ));
            }
            if let Some(s) = &tr.sink_excited {
                if s.len() != excited {
                    return Err(format!(
                        "transitions.{kind}.sink_excited: {} entries for {excited} excited state(s)",
                        s.len()
                    ));
                }
            }
            let square = tr.both_excited.len() == excited
                && tr.both_excited.iter().all(|r| r.len() == excited);
            if !(square || tr.both_excited.is_empty()) {
                return Err(format!(
                    "transitions.{kind}.both_excited: expected a {excited} x {excited} matrix (or nothing)"
                ));
            }
        }
        Ok(())
    }

    /// The default noise growth needs the pion mass; significant digits within 1..=17.
    fn check_noise_and_output(&self) -> Checked {
        if self.hadron.kind == Hadron::Spin1Half
            && self.noise.growth_rate.is_none()
            && self.hadron.m_pi.is_none()
            && (self.noise.twopt.0 > 0.0 || self.noise.threept.0 > 0.0)
        {
            return Err(
                "noise.growth_rate: not set, and the default E_0(p) - 3 m_pi / 2 needs hadron.m_pi"
                    .into(),
            );
        }
        if let Some(d) = self.output.significant_digits {
            if !(1..=17).contains(&d) {
                return Err(format!("output.significant_digits: {d} is outside 1..=17"));
            }
        }
        Ok(())
    }
}

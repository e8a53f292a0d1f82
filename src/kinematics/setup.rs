//! Per-resample on-shell kinematics of a channel: lattice momenta with twists, energies from
//! the two-point fits or from a dispersion relation (the user's choice, docs/methods.md §5), Q².

use super::momentum::{
    continuum_energy, continuum_mass, lattice_dispersion_energy, lattice_dispersion_mass,
    lattice_momentum, q_squared, OnShell,
};
use super::Hadron;
use crate::data::{sub, Momentum};
use crate::resample::Resampled;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// Which dispersion relation turns a mass and a momentum into an energy.
#[derive(
    Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema,
)]
#[serde(rename_all = "lowercase")]
pub enum Dispersion {
    /// `E² = m² + p²`.
    #[default]
    Continuum,
    /// `sinh²(E/2) = sinh²(m/2) + sum_i sin²(p_i/2)`.
    Lattice,
}

impl Dispersion {
    /// The energy of a hadron of `mass` at momentum `p` (lattice units).
    pub fn energy(self, mass: f64, p: [f64; 3]) -> f64 {
        match self {
            Dispersion::Continuum => continuum_energy(mass, p),
            Dispersion::Lattice => lattice_dispersion_energy(mass, p),
        }
    }

    /// The mass of a hadron whose energy at momentum `p` is `energy`: the relation inverted
    /// (NaN where no positive mass has that energy).
    pub fn mass(self, energy: f64, p: [f64; 3]) -> f64 {
        match self {
            Dispersion::Continuum => continuum_mass(energy, p),
            Dispersion::Lattice => lattice_dispersion_mass(energy, p),
        }
    }

    /// The relation's name as the run states it.
    pub fn name(self) -> &'static str {
        match self {
            Dispersion::Continuum => "continuum",
            Dispersion::Lattice => "lattice",
        }
    }
}

/// The user's choice of energies for the kinematic factors: the fitted energy at every
/// momentum, or the fitted mass with a dispersion relation.
#[derive(
    Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema,
)]
#[serde(rename_all = "lowercase")]
pub enum EnergySource {
    /// Fitted energies per momentum from the two-point stage.
    #[default]
    #[serde(alias = "fit")]
    Fitted,
    /// The continuum dispersion relation on the fitted mass.
    Continuum,
    /// The lattice dispersion relation on the fitted mass.
    Lattice,
}

impl EnergySource {
    /// The energies for this choice, given the fitted energies per momentum.
    pub fn energies(self, fitted: BTreeMap<Momentum, Resampled>) -> Energies {
        match self {
            EnergySource::Fitted => Energies::Fitted(fitted),
            EnergySource::Continuum => Energies::Dispersion(Dispersion::Continuum),
            EnergySource::Lattice => Energies::Dispersion(Dispersion::Lattice),
        }
    }
}

/// Where the energies of sink and source come from.
#[derive(Clone, Debug, PartialEq)]
pub enum Energies {
    /// Fitted energies per integer momentum, one resampled value each (from the two-point stage).
    Fitted(BTreeMap<Momentum, Resampled>),
    /// The dispersion relation applied to the mass, per resample.
    Dispersion(Dispersion),
}

/// Everything needed to turn a channel's integer momenta into on-shell kinematics, per resample.
#[derive(Clone, Debug, PartialEq)]
pub struct KinematicSetup {
    /// Spin of the hadron.
    pub hadron: Hadron,
    /// Spatial lattice extent `L`.
    pub l: usize,
    /// Twist angles (radians) of the sink momentum, per direction.
    pub twist_sink: [f64; 3],
    /// Twist angles (radians) of the source momentum, per direction.
    pub twist_source: [f64; 3],
    /// Hadron mass in lattice units (from the zero-momentum two-point fit).
    pub mass: Resampled,
    /// Source of the energies.
    pub energies: Energies,
    /// Lattice spacing in fm, for GeV² output; `None` keeps lattice units only.
    pub spacing_fm: Option<f64>,
}

/// The energy at one momentum: a fitted one per sample, or the dispersion relation on the
/// sample's mass.
#[derive(Clone, Copy, Debug)]
enum Energy<'a> {
    Fitted(&'a Resampled),
    Dispersion(Dispersion),
}

/// One channel's momenta and the sources of its energies, resolved once: its on-shell
/// kinematics at any sample ([`KinematicSetup::channel`]).
#[derive(Clone, Copy, Debug)]
pub(crate) struct ChannelKinematics<'a> {
    mass: &'a Resampled,
    pf: [f64; 3],
    pi: [f64; 3],
    ef: Energy<'a>,
    ei: Energy<'a>,
}

impl ChannelKinematics<'_> {
    /// On-shell kinematics at sample `s` (`None`: central value).
    pub(crate) fn at(&self, s: Option<usize>) -> OnShell {
        let mass = at(self.mass, s);
        let energy = |e: Energy<'_>, p: [f64; 3]| match e {
            Energy::Fitted(r) => at(r, s),
            Energy::Dispersion(d) => d.energy(mass, p),
        };
        OnShell {
            mass,
            pf: self.pf,
            pi: self.pi,
            ef: energy(self.ef, self.pf),
            ei: energy(self.ei, self.pi),
        }
    }
}

/// Value of `r` at sample `s`, or the central value for `None`.
pub(crate) fn at(r: &Resampled, s: Option<usize>) -> f64 {
    s.map_or(r.central, |i| r.samples[i])
}

impl KinematicSetup {
    /// True when any twist angle is non-zero (Q² shells are then formed by value).
    pub fn is_twisted(&self) -> bool {
        self.twist_sink
            .iter()
            .chain(&self.twist_source)
            .any(|t| *t != 0.0)
    }

    /// Check that the setup can serve `n_samples` resamples; returns the number of samples.
    /// (Fitted energies with different sink and source twists are checked against the
    /// channels in `decompose`: every momentum must be used on one side only.)
    pub fn validate(&self) -> Result<usize> {
        let n = self.mass.len();
        if self.l == 0 {
            return Err(Error::config(
                "kinematics: the spatial extent L must be positive",
            ));
        }
        if !self.mass.is_finite() || self.mass.central <= 0.0 {
            return Err(Error::analysis(
                "kinematics",
                format!(
                    "the hadron mass must be positive and finite, got {}",
                    self.mass.central
                ),
            ));
        }
        if let Energies::Fitted(map) = &self.energies {
            for (p, e) in map {
                if e.len() != n || e.scheme != self.mass.scheme {
                    return Err(Error::analysis(
                        "kinematics",
                        format!(
                            "fitted energy at momentum {} has {} samples ({:?}), the mass has {n} ({:?})",
                            crate::data::momentum_text(*p),
                            e.len(),
                            e.scheme,
                            self.mass.scheme
                        ),
                    ));
                }
            }
        }
        Ok(n)
    }

    /// Where the energy at integer momentum `n` comes from.
    fn energy(&self, n: Momentum) -> Result<Energy<'_>> {
        match &self.energies {
            Energies::Fitted(map) => map.get(&n).map(Energy::Fitted).ok_or_else(|| {
                Error::analysis(
                    "kinematics",
                    format!("no fitted energy for momentum {n:?}; fit the two-point function there or use a dispersion relation"),
                )
            }),
            Energies::Dispersion(d) => Ok(Energy::Dispersion(*d)),
        }
    }

    /// The kinematics of a channel with sink momentum `pf` and momentum transfer `q`
    /// (integer, source `pf - q`), its energies looked up once for all samples.
    pub(crate) fn channel(&self, pf: Momentum, q: Momentum) -> Result<ChannelKinematics<'_>> {
        let ni = sub(pf, q);
        Ok(ChannelKinematics {
            mass: &self.mass,
            pf: lattice_momentum(pf, self.l, self.twist_sink),
            pi: lattice_momentum(ni, self.l, self.twist_source),
            ef: self.energy(pf)?,
            ei: self.energy(ni)?,
        })
    }

    /// On-shell kinematics of a channel with sink momentum `pf` and momentum transfer `q`
    /// (integer, source `pf - q`), at sample `s` (`None`: central value).
    pub fn on_shell(&self, pf: Momentum, q: Momentum, s: Option<usize>) -> Result<OnShell> {
        Ok(self.channel(pf, q)?.at(s))
    }

    /// Q² of a channel in lattice units, per resample.
    pub fn q2(&self, pf: Momentum, q: Momentum) -> Result<Resampled> {
        let k = self.channel(pf, q)?;
        let central = q_squared(&k.at(None));
        let samples = (0..self.mass.len())
            .map(|s| q_squared(&k.at(Some(s))))
            .collect();
        Ok(Resampled::new(central, samples, self.mass.scheme))
    }
}

//! Form-factor decomposition: from the ratio plateaus of many channels to form factors per
//! Q² shell, by weighted least squares per resample (docs/methods.md §5).
//!
//! Within a shell (equal `|n_f|², |n_i|², |n_q|²` without twists, equal Q² within a tolerance
//! with twists) and a current kind, every channel gives `Pi_c = sum_k K_ck G_k` with complex
//! `K` from [`coefficients`]. Real and imaginary parts whose coefficients do not all vanish are
//! stacked into a real linear system, whitened by the data covariance (its diagonal or the
//! full or shrunk matrix, estimated once from the resamples and held fixed, common practice), and solved
//! by SVD on the central value and on every resample. Channels whose coefficients all vanish
//! are dropped and counted; form factors that no channel of the shell constrains are left out
//! of that shell.

mod cache;
mod resamples;
mod rows;
mod settings;
mod shells;
mod solve;

pub use cache::CoefficientCache;
pub use settings::DecompositionSettings;

use super::factors::FormFactor;
use super::phase::Phase;
use super::setup::{Energies, KinematicSetup};
use super::twists::twists_by_side;
use crate::data::{Current, CurrentKind, Momentum, Projector};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::Complex;
use serde::Serialize;
use std::collections::BTreeMap;

/// The large-time ratio of one channel for one excited-state method: a complex number given
/// as two resampled values.
#[derive(Clone, Debug, PartialEq)]
pub struct ChannelValue {
    /// Sink momentum (integer).
    pub pf: Momentum,
    /// Momentum transfer (integer); the source momentum is `pf - q`.
    pub q: Momentum,
    /// The inserted current.
    pub current: Current,
    /// The spin projector.
    pub projector: Projector,
    /// Real part.
    pub re: Resampled,
    /// Imaginary part.
    pub im: Resampled,
}

impl ChannelValue {
    /// A readable channel name for messages.
    pub fn label(&self) -> String {
        format!(
            "pf={} q={} {} {}",
            crate::data::momentum_text(self.pf),
            crate::data::momentum_text(self.q),
            self.current,
            self.projector
        )
    }
}

/// The form factors of one Q² shell and one current kind.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ShellResult {
    /// The shell, e.g. `nf2=0 ni2=1 nq2=1` or `Q2=0.1234` with twists.
    pub label: String,
    /// Current kind of the channels.
    pub kind: CurrentKind,
    /// Q² in lattice units (mean over the shell's channels, per resample).
    pub q2: Resampled,
    /// Q² in GeV², when the lattice spacing is known.
    pub q2_gev2: Option<Resampled>,
    /// The solved form factors.
    pub form_factors: Vec<(FormFactor, Resampled)>,
    /// Channels used.
    pub n_channels: usize,
    /// Channels dropped because all their coefficients vanish.
    pub n_dropped: usize,
    /// Real equations minus form factors.
    pub dof: usize,
    /// `chi2 / dof` of the central solve; `None` when `dof = 0`.
    pub chi2_dof: Option<f64>,
    /// Condition number of the whitened coefficient matrix (central value): the largest
    /// singular value over the smallest one kept (above [`SINGULAR_THRESHOLD`] of the
    /// largest).
    pub condition: f64,
    /// Form factors the shell's channels do not determine (they mix with a direction whose
    /// singular value is below [`SINGULAR_THRESHOLD`] of the largest); not reported.
    pub undetermined: Vec<FormFactor>,
}

/// A singular value below this share of the largest counts as zero: the combination of form
/// factors along it is not determined by the shell's channels.
pub const SINGULAR_THRESHOLD: f64 = 1e-8;

/// A form factor is reported only if its overlap with the undetermined directions is below
/// this (the pseudo-inverse solution is then independent of them).
const NULL_OVERLAP: f64 = 1e-6;

/// A shell that could not be solved, and why.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SkippedShell {
    /// The shell.
    pub label: String,
    /// Current kind of the channels.
    pub kind: CurrentKind,
    /// What went wrong.
    pub reason: String,
}

/// All shells of one decomposition.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct Decomposition {
    /// Solved shells, ordered by current kind and Q².
    pub shells: Vec<ShellResult>,
    /// Shells that could not be solved (reported, not fatal).
    pub skipped: Vec<SkippedShell>,
}

/// Decompose the channel values of one excited-state method into form factors per Q² shell.
///
/// Errors are returned for inconsistent input (sample counts, unknown phase keys, missing
/// energies); a shell that cannot be solved (too few equations, zero variance, singular
/// system) is listed in [`Decomposition::skipped`] and the others carry on.
pub fn decompose(
    channels: &[ChannelValue],
    setup: &KinematicSetup,
    settings: &DecompositionSettings,
) -> Result<Decomposition> {
    decompose_cached(channels, setup, settings, &CoefficientCache::new())
}

/// [`decompose`] with the kinematic coefficients taken from (and added to) `cache`, which
/// must belong to `setup`: the decompositions of several methods with one setup compute them
/// once.
pub fn decompose_cached(
    channels: &[ChannelValue],
    setup: &KinematicSetup,
    settings: &DecompositionSettings,
    cache: &CoefficientCache,
) -> Result<Decomposition> {
    let n = setup.validate()?;
    if matches!(setup.energies, Energies::Fitted(_)) && setup.twist_sink != setup.twist_source {
        // Fitted energies are keyed by integer momentum: each must stand for one twist.
        let pairs = channels.iter().map(|c| (c.pf, c.q));
        twists_by_side(pairs, [], setup.twist_sink, setup.twist_source)?;
    }
    let phases = parse_phases(&settings.phases)?;
    for c in channels {
        for part in [&c.re, &c.im] {
            if part.len() != n || part.scheme != setup.mass.scheme {
                return Err(Error::analysis(
                    "kinematics",
                    format!(
                        "channel {} has {} samples ({:?}), the mass has {n} ({:?})",
                        c.label(),
                        part.len(),
                        part.scheme,
                        setup.mass.scheme
                    ),
                ));
            }
        }
    }
    let mut out = Decomposition::default();
    for (label, kind, members) in shells::shells(channels, setup, settings.q2_tolerance)? {
        match solve::solve_shell(&members, kind, setup, settings.weights, &phases, n, cache) {
            Ok(mut r) => {
                r.label = label;
                out.shells.push(r);
            }
            Err(reason) => out.skipped.push(SkippedShell {
                label,
                kind,
                reason,
            }),
        }
    }
    Ok(out)
}

fn parse_phases(phases: &BTreeMap<String, Phase>) -> Result<BTreeMap<Current, Complex<f64>>> {
    phases
        .iter()
        .map(|(name, p)| {
            Current::parse(name).map(|c| (c, p.value())).ok_or_else(|| {
                Error::config(format!(
                    "decomposition phases: `{name}` is not a current; expected one of V1..V4, A1..A4, S, P, T12..T34"
                ))
            })
        })
        .collect()
}

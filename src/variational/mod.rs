//! The variational method end to end (docs/methods.md §2; Blossier et al., JHEP 04 (2009)
//! 094): correlator matrices between the operators of a basis in, optimised operators out.
//!
//! Per momentum the stage resamples the two-point matrix, solves the GEVP on the central
//! value and every resample ([`crate::spectrum::gevp`]: per-t and fixed-vector solutions,
//! state order and signs matched to the central solution), computes effective energies of
//! every principal correlator and fits them with the spectrum stage's fits (windows moved to
//! `t_min > t0`). The ground-state vectors of `t_ref` then define the optimised operators
//! that [`project`] applies to the data, so the spectrum, ratio, decomposition and Q² stages
//! run unchanged on optimised correlators (the two-state ratio fit then describes the
//! projected correlators, whose gaps and amplitudes the spectrum stage fits).

pub mod basis;
pub mod project;

use crate::data::{Momentum, TwoPointData};
use crate::error::{Error, Result};
use crate::resample::{ResamplePlan, Resampled};
use crate::spectrum::effective::{effective_mass, EffectiveMassKind};
use crate::spectrum::gevp::{principal_correlators, PrincipalCorrelators};
use crate::spectrum::{
    fit_correlator, resample_series, GevpSettings, GevpSolutionKind, IntRange, MomentumSpectrum,
    SpectrumSettings,
};
use std::collections::BTreeMap;

/// The variational analysis at one momentum.
#[derive(Clone, Debug, PartialEq)]
pub struct MomentumGevp {
    /// Integer momentum.
    pub momentum: Momentum,
    /// Principal correlators (per-t and fixed-vector) and eigenvectors at every `t`.
    pub correlators: PrincipalCorrelators,
    /// Effective energies `ln(c(t)/c(t+1))` of the per-t principal correlators, `[n][t]`.
    pub effective_per_t: Vec<Vec<Option<Resampled>>>,
    /// Effective energies of the fixed-vector correlators, `[n][t]`.
    pub effective_fixed: Vec<Vec<Option<Resampled>>>,
    /// Fits to each state's correlator of the chosen solution (ground first); `None` where
    /// no fit succeeded (reason in the warnings).
    pub states: Vec<Option<MomentumSpectrum>>,
}

impl MomentumGevp {
    /// Energy of state `n` from its principal-correlator fit, when fitted.
    pub fn energy(&self, n: usize) -> Option<&Resampled> {
        self.states.get(n)?.as_ref().map(|s| s.ground_energy())
    }

    /// Central ground-state eigenvector at `t_ref` (the optimised operator's weights).
    pub fn ground_vector(&self) -> Vec<f64> {
        self.correlators
            .vector_at_ref(0)
            .iter()
            .map(|v| v.central)
            .collect()
    }
}

/// The output of the variational stage.
#[derive(Clone, Debug, PartialEq)]
pub struct VariationalResult {
    /// The operator basis (matrix order).
    pub operators: Vec<String>,
    /// The settings used.
    pub settings: GevpSettings,
    /// Per momentum.
    pub per_momentum: BTreeMap<Momentum, MomentumGevp>,
    /// Warnings (fits that failed, signals lost).
    pub warnings: Vec<String>,
}

impl VariationalResult {
    /// The optimised operators' weights per momentum, for [`project`].
    pub fn vectors(&self) -> project::Vectors {
        self.per_momentum
            .iter()
            .map(|(p, g)| (*p, g.ground_vector()))
            .collect()
    }
}

/// Run the variational analysis on the (binned) two-point data with the resample `plan`.
/// `settings.gevp` must be set; its fits use the rest of `settings`.
pub fn run(
    two: &TwoPointData,
    plan: &ResamplePlan,
    settings: &SpectrumSettings,
) -> Result<VariationalResult> {
    let g = settings
        .gevp
        .clone()
        .ok_or_else(|| Error::config("spectrum.gevp is not set"))?;
    g.validate()
        .map_err(|e| Error::config(format!("spectrum.{}: {}", e.key, e.message)))?;
    let ops = basis::operators(two);
    let matrices = basis::twopt_matrices(two, &ops)?;
    let fit_settings = SpectrumSettings {
        t_min: IntRange {
            from: settings.t_min.from.max(g.t0 + 1),
            to: settings.t_min.to.max(g.t0 + 1),
        },
        periodic: false,
        gevp: None,
        ..settings.clone()
    };
    let mut warnings = Vec::new();
    let mut per_momentum = BTreeMap::new();
    for (p, matrix) in matrices {
        let name = format!("momentum ({},{},{})", p[0], p[1], p[2]);
        let resampled = matrix
            .iter()
            .map(|s| resample_series(s, plan))
            .collect::<Result<Vec<_>>>()?;
        let pc = principal_correlators(&resampled, ops.len(), g.t0, g.t_ref)
            .map_err(|e| Error::analysis("gevp", format!("{name}: {e}")))?;
        let effective = |c: &[Vec<Resampled>]| -> Vec<Vec<Option<Resampled>>> {
            c.iter()
                .map(|x| effective_mass(x, EffectiveMassKind::Log))
                .collect()
        };
        let chosen = match g.energies_from {
            GevpSolutionKind::PerT => &pc.lambda,
            GevpSolutionKind::Fixed => &pc.fixed,
        };
        let states = chosen
            .iter()
            .enumerate()
            .map(
                |(k, c)| match fit_correlator(p, c, c, None, &fit_settings, &mut warnings) {
                    Ok(s) => Some(s),
                    Err(e) => {
                        warnings.push(format!("{name}: GEVP state {k} not fitted: {e}"));
                        None
                    }
                },
            )
            .collect();
        per_momentum.insert(
            p,
            MomentumGevp {
                momentum: p,
                effective_per_t: effective(&pc.lambda),
                effective_fixed: effective(&pc.fixed),
                correlators: pc,
                states,
            },
        );
    }
    Ok(VariationalResult {
        operators: ops,
        settings: g,
        per_momentum,
        warnings,
    })
}

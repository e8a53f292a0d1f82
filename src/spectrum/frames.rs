//! Per-momentum settings of the spectrum fits: the ground-energy prior carried from the rest
//! frame by a dispersion relation (or given per momentum), the first-gap prior carried from the
//! rest frame's fitted spectrum, the notes that say which, and the last time slice before the
//! signal dies. Kept apart from the stage driver so that each
//! stays short. Momenta carry the twist of their two-point function
//! (`SpectrumSettings::twist_at`); a twisted fit at (0,0,0) is carried through the mass that
//! the relation gives it (`rest_mass`).

use super::rest_mass;
use super::settings::{self, PriorFrames, SpectrumSettings};
use super::MomentumSpectrum;
use crate::data::Momentum;
use crate::fit::Prior;
use crate::kinematics::Dispersion;
use crate::resample::Resampled;

/// The dispersion relation that carries a prior to moving frames.
fn relation_of(frames: PriorFrames) -> Dispersion {
    match frames {
        PriorFrames::LatticeDispersion => Dispersion::Lattice,
        _ => Dispersion::Continuum,
    }
}

/// The settings at momentum `p`: the ground-energy prior given per momentum, or the rest-frame
/// prior carried by the dispersion relation of `prior_frames` (rest only without `l_extent`).
pub(super) fn momentum_settings(p: Momentum, settings: &SpectrumSettings) -> SpectrumSettings {
    let mut local = settings.clone();
    let own = settings
        .ground_energy_by_momentum
        .iter()
        .find(|(k, _)| settings::parse_momentum_key(k) == Some(p))
        .map(|(_, prior)| *prior);
    local.priors.ground_energy = match (own, settings.priors.ground_energy) {
        (Some(prior), _) => Some(prior),
        (None, Some(rest)) if p != [0, 0, 0] => match (settings.prior_frames, settings.l_extent) {
            (PriorFrames::RestOnly, _) | (_, None) => None,
            (frames, Some(l)) => {
                let pl = crate::kinematics::lattice_momentum(p, l, settings.twist_at(p));
                let relation = relation_of(frames);
                let e = rest_mass::carried_energy(rest.mean, pl, relation, settings);
                // Width carried by dE/dm (numerically, so both relations share the code).
                let h = 1e-6 * rest.mean.abs().max(1e-3);
                let eh = rest_mass::carried_energy(rest.mean + h, pl, relation, settings);
                let width = rest.width * ((eh - e) / h).abs();
                (e.is_finite() && width.is_finite()).then(|| Prior::new(e, width))
            }
        },
        (None, rest) => rest.filter(|_| p == [0, 0, 0]),
    };
    local
}

/// What the run says about the ground-energy prior at moving frames.
pub(super) fn prior_frames_note(settings: &SpectrumSettings) -> Option<String> {
    settings.priors.ground_energy?;
    Some(match (settings.prior_frames, settings.l_extent) {
        (PriorFrames::RestOnly, _) => {
            "the ground-energy prior applies at rest only (moving frames: per-momentum priors if given)".into()
        }
        (_, None) => "the ground-energy prior applies at rest only: `l_extent` is not set, so it \
                      cannot be carried to moving frames"
            .into(),
        (PriorFrames::ContinuumDispersion, _) => {
            "the ground-energy prior is carried to moving frames by the continuum dispersion relation".into()
        }
        (PriorFrames::LatticeDispersion, _) => {
            "the ground-energy prior is carried to moving frames by the lattice dispersion relation".into()
        }
    })
}

/// The last usable time slice at or below `cap`: one before the first slice from `t_from` on
/// whose central value is not positive or whose relative error exceeds `max_rel`; with the
/// reason when the signal cut it.
pub(super) fn signal_t_max(
    corr: &[Resampled],
    t_from: usize,
    cap: usize,
    max_rel: f64,
) -> (usize, Option<String>) {
    let last = cap.min(corr.len().saturating_sub(1));
    for (t, c) in corr.iter().enumerate().take(last + 1).skip(t_from) {
        let why = if c.central <= 0.0 {
            format!(
                "the correlator is {:.3e} (not positive) at t = {t}",
                c.central
            )
        } else if c.error() > max_rel * c.central {
            format!(
                "the relative error reaches {:.2} > {max_rel} at t = {t}",
                c.error() / c.central
            )
        } else {
            continue;
        };
        return (t.saturating_sub(1), Some(why));
    }
    (cap, None)
}

/// The rest frame's first gap as its model average over the multi-state fits found it
/// ([`super::ExcitedAverage`]), to be carried to the moving frames
/// (`SpectrumSettings::rest_frame_gap_width`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct RestGap {
    /// Ground energy averaged over those fits.
    e0: f64,
    /// First excited energy averaged over those fits.
    e1: f64,
    /// Resampled error of `ln(E_1 - E_0)`.
    log_gap_error: f64,
}

/// The rest frame's gap, when some multi-state fit is in its model average (physical and
/// resolved) and the averaged gap is positive.
pub(super) fn rest_gap(rest: &MomentumSpectrum) -> Option<RestGap> {
    let x = rest.average.excited.as_ref()?;
    let out = RestGap {
        e0: x.ground_energy.central,
        e1: x.energy.central,
        log_gap_error: x.gap.map(f64::ln).error(),
    };
    (out.e1 > out.e0 && out.log_gap_error.is_finite()).then_some(out)
}

/// The first-gap prior at momentum `p`: mean `ln(E_1(p) - E_0(p))` with both rest-frame
/// energies carried by the dispersion relation of `prior_frames`, width `width` and the
/// rest-frame log-gap error in quadrature. `None` at rest, with `rest_only`, without `l_extent`,
/// or when the carried gap is not positive.
pub(super) fn carried_gap_prior(
    p: Momentum,
    rest: &RestGap,
    width: f64,
    settings: &SpectrumSettings,
) -> Option<Prior> {
    let l = settings.l_extent.filter(|_| p != [0, 0, 0])?;
    let pl = crate::kinematics::lattice_momentum(p, l, settings.twist_at(p));
    let energy = |e_rest: f64| match settings.prior_frames {
        PriorFrames::RestOnly => None,
        frames => Some(rest_mass::carried_energy(
            e_rest,
            pl,
            relation_of(frames),
            settings,
        )),
    };
    let gap = energy(rest.e1)? - energy(rest.e0)?;
    (gap > 0.0 && gap.is_finite()).then(|| Prior::new(gap.ln(), width.hypot(rest.log_gap_error)))
}

/// What the run says about the carried first-gap priors.
pub(super) fn gap_prior_note(
    rest: Option<&RestGap>,
    settings: &SpectrumSettings,
) -> Option<String> {
    let width = settings.rest_frame_gap_width?;
    if settings.n_states.to < 2 {
        return None;
    }
    Some(match rest {
        Some(r)
            if settings.l_extent.is_some() && settings.prior_frames != PriorFrames::RestOnly =>
        {
            format!(
                "moving frames take the prior of their first gap from the rest frame (E1 - E0 = \
                 {:.4} at rest, carried by the {} dispersion relation; log-gap width {width} \
                 with the rest-frame error {:.2} in quadrature)",
                r.e1 - r.e0,
                match settings.prior_frames {
                    PriorFrames::LatticeDispersion => "lattice",
                    _ => "continuum",
                },
                r.log_gap_error
            )
        }
        _ => "moving frames keep the default gap prior: the rest frame has no resolved \
              multi-state fit (or no dispersion relation is set)"
            .into(),
    })
}

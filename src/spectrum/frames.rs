//! Per-momentum settings of the spectrum fits: the ground-energy prior carried from the rest
//! frame by a dispersion relation (or given per momentum), the note that says which, and the
//! last time slice before the signal dies. Kept apart from the stage driver so that each
//! stays short.

use super::dispersion;
use super::settings::{self, PriorFrames, SpectrumSettings};
use crate::data::Momentum;
use crate::fit::Prior;
use crate::resample::Resampled;

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
                let pl =
                    crate::kinematics::lattice_momentum(p, l, settings.twist.unwrap_or_default());
                let m = Resampled::constant(rest.mean, 2, crate::resample::Scheme::Bootstrap);
                let e = match frames {
                    PriorFrames::LatticeDispersion => dispersion::lattice_energy(&m, pl),
                    _ => dispersion::continuum_energy(&m, pl),
                }
                .central;
                // Width carried by dE/dm (numerically, so both relations share the code).
                let h = 1e-6 * rest.mean.abs().max(1e-3);
                let mh = Resampled::constant(rest.mean + h, 2, crate::resample::Scheme::Bootstrap);
                let eh = match frames {
                    PriorFrames::LatticeDispersion => dispersion::lattice_energy(&mh, pl),
                    _ => dispersion::continuum_energy(&mh, pl),
                }
                .central;
                Some(Prior::new(e, rest.width * ((eh - e) / h).abs()))
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

//! Two-state fits of the ratio (docs/methods.md §4), in three variants chosen by
//! `excited_states.two_state`: gaps fixed per resample from the two-point stage (`fixed`,
//! linear, closed form), gaps floating with priors (`floating`), or a joint fit with the
//! two-point functions (`joint`). This module only dispatches; the dependencies point one
//! way, `joint → floating → fixed`.

mod designs;
mod fixed;
mod floating;
#[cfg(test)]
mod jacobian_check;
mod joint;

pub use designs::DesignMemo;
pub use fixed::{two_state_fixed, FittedGaps, Gaps, TwoPointStates, TwoStateFit};

use super::{ChannelRatio, RatioSettings, TwoStateVariant};
use crate::data::Momentum;
use crate::Result;
use std::collections::BTreeMap;

/// The two-state fit in the variant `settings.two_state` asks for.
pub fn two_state(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
) -> Result<TwoStateFit> {
    match settings.two_state {
        TwoStateVariant::FixedGaps => two_state_fixed(ratio, states, settings),
        TwoStateVariant::FloatingGaps { prior_width_factor } => {
            floating::two_state_floating(ratio, states, settings, prior_width_factor)
        }
        TwoStateVariant::JointWithTwoPoint { t_min, t_max } => {
            joint::two_state_joint(ratio, states, settings, t_min, t_max)
        }
    }
}

/// [`two_state`] and, when `excited_states.two_state_late` asks for it and that fit used at
/// least three separations, the same variant without the smallest separation
/// ([`crate::ratio::Estimator::TwoStateLate`]). The fixed-gap variant shares its per-resample
/// designs between the two fits, and through `memo` with the next channel of the same momenta.
pub fn two_state_with_late(
    ratio: &ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    memo: &mut DesignMemo<'_, BTreeMap<Momentum, TwoPointStates>>,
) -> (Result<TwoStateFit>, Option<Result<TwoStateFit>>) {
    if settings.two_state == TwoStateVariant::FixedGaps {
        let late = settings.two_state_late;
        return fixed::two_state_fixed_and_late(ratio, states, settings, late, memo);
    }
    let first = two_state(ratio, states, settings);
    let second = first
        .as_ref()
        .ok()
        .and_then(|fit| late_settings(fit, settings))
        .map(|late| two_state(ratio, states, &late));
    (first, second)
}

/// The settings of the late fit after `fit`: `two_state_tsep_min` raised to the second
/// separation `fit` used; `None` unless `excited_states.two_state_late` asks for it, or when
/// `fit` used fewer than three separations (the late fit would have one only).
fn late_settings(fit: &TwoStateFit, settings: &RatioSettings) -> Option<RatioSettings> {
    let second = *fit.tseps.get(1)?;
    (settings.two_state_late && fit.tseps.len() >= 3).then(|| RatioSettings {
        two_state_tsep_min: second,
        ..settings.clone()
    })
}

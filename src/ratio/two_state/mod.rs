//! Two-state fits of the ratio (docs/methods.md §4), in three variants chosen by
//! `excited_states.two_state`: gaps fixed per resample from the two-point stage (`fixed`,
//! linear, closed form), gaps floating with priors (`floating`), or a joint fit with the
//! two-point functions (`joint`). This module only dispatches; the dependencies point one
//! way, `joint → floating → fixed`.

mod fixed;
mod floating;
mod joint;

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

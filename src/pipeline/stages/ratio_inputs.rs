//! What the ratio stage takes from the spectrum stage: the three-point channels whose
//! momenta the spectrum kept, and the two-point parameters of the two-state ratio fit.

use crate::data::{Momentum, ThreePointData};
use crate::pipeline::observer::Recorder;
use crate::ratio::TwoPointStates;
use crate::spectrum::SpectrumResult;
use std::collections::BTreeMap;

/// Remove the three-point channels whose sink or source momentum the spectrum dropped.
pub(in crate::pipeline) fn skip_dropped_momenta(
    three: &mut ThreePointData,
    dropped: &[(Momentum, String)],
    rec: &mut Recorder,
) {
    if dropped.is_empty() {
        return;
    }
    let gone = |p: Momentum| dropped.iter().any(|(d, _)| *d == p);
    let before = three.channels.len();
    three
        .channels
        .retain(|k, _| !gone(k.pf) && !gone(k.source_momentum()));
    let n = before - three.channels.len();
    if n > 0 {
        rec.warn(format!(
            "ratio: {n} three-point channel(s) skipped: their sink or source momentum was \
             dropped by the spectrum stage"
        ));
    }
}

/// What the two-state ratio fit needs from the spectrum: per momentum the ground energy,
/// the amplitude ratio and the gap of the best multi-state fit.
pub(in crate::pipeline) fn two_point_states(
    sp: &SpectrumResult,
) -> BTreeMap<Momentum, TwoPointStates> {
    sp.per_momentum
        .iter()
        .filter_map(|(p, m)| {
            Some((
                *p,
                TwoPointStates {
                    energy: m.ground_energy().clone(),
                    amp_ratio: m.amplitude_ratio()?,
                    gap: m.gap()?,
                },
            ))
        })
        .collect()
}

//! What the spectrum stage takes from the data besides the two-point functions: the twist each
//! two-point function carries. With different sink and source twists
//! (`ensemble.twist_sink`, `ensemble.twist_source`) a two-point function carries the twist
//! of the side the three-point channels use its momentum on (`kinematics::twists_by_side`);
//! momenta no channel uses carry the sink twist. The dispersion table, the carried priors,
//! the `E(p) >= m` gate and the mass from a twisted fit at (0,0,0) all follow from it.

use crate::data::{ThreePointData, TwoPointData};
use crate::pipeline::plan::Plan;
use crate::spectrum::SpectrumSettings;
use crate::Result;

/// The spectrum settings of this run, with the twist of every two-point momentum filled in
/// from the three-point channels when sink and source twists differ.
pub(in crate::pipeline) fn spectrum_settings(
    plan: &Plan,
    two: &TwoPointData,
    three: &ThreePointData,
) -> Result<SpectrumSettings> {
    let mut settings = plan.spec.spectrum.clone();
    let e = &plan.spec.ensemble;
    let (sink, source) = (e.sink_twist(), e.source_twist());
    if sink == source {
        return Ok(settings);
    }
    let pairs = three.channels.keys().map(|k| (k.pf, k.q));
    let momenta = two.channels.keys().map(|k| k.momentum);
    let key = if e.twist_source.is_some() {
        "ensemble.twist_source"
    } else {
        "ensemble.twist_sink"
    };
    settings.twists = crate::kinematics::twists_by_side(pairs, momenta, sink, source)
        .map_err(|err| plan.error(key, err))?;
    Ok(settings)
}

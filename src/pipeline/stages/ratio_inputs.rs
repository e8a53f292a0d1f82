//! What the ratio stage takes from the spectrum stage: the three-point channels whose
//! momenta the spectrum kept, and the two-point parameters of the two-state ratio fit.

use crate::data::{Momentum, ThreePointData};
use crate::pipeline::observer::Recorder;
use crate::ratio::TwoPointStates;
use crate::resample::Resampled;
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
/// the amplitude ratio and the gap averaged over the multi-state fits
/// ([`crate::spectrum::ExcitedAverage`]).
///
/// A resample on which that fit jumped to another solution (its amplitude ratio or gap
/// outside [`Resampled::inlier_band`], e.g. a tiny spurious "ground" state below the real one
/// with `a` in the tens) takes the central fit's `a` and gap instead, and the run says at
/// which momenta and how often. Otherwise the non-linear two-state ratio fit turns such a
/// sample into a form-factor sample many sigma away, which the bootstrap reaches far more
/// often than the jackknife (the demo's two-state G_M error differed by 42 % between them).
pub(in crate::pipeline) fn two_point_states(
    sp: &SpectrumResult,
    rec: &mut Recorder,
) -> BTreeMap<Momentum, TwoPointStates> {
    let mut jumped: Vec<(Momentum, usize)> = Vec::new();
    let states = sp
        .per_momentum
        .iter()
        .filter_map(|(p, m)| {
            let (mut amp_ratio, mut gap) = (m.amplitude_ratio()?, m.gap()?);
            let n = central_where_jumped(&mut amp_ratio, &mut gap);
            if n > 0 {
                jumped.push((*p, n));
            }
            Some((
                *p,
                TwoPointStates {
                    energy: m.ground_energy().clone(),
                    amp_ratio,
                    gap,
                },
            ))
        })
        .collect();
    if !jumped.is_empty() {
        let n_samples = sp
            .per_momentum
            .values()
            .next()
            .map_or(0, |m| m.ground_energy().len());
        let list: Vec<String> = jumped
            .iter()
            .take(6)
            .map(|(p, n)| format!("({},{},{}): {n}", p[0], p[1], p[2]))
            .collect();
        let more = if jumped.len() > 6 { ", ..." } else { "" };
        rec.warn(format!(
            "ratio: the two-point fit behind the two-state ratio fit jumped to another \
             solution on some of the {n_samples} resamples at {} momenta (resamples per \
             momentum: {}{more}); those resamples use the central fit's amplitude ratio and gap",
            jumped.len(),
            list.join(", ")
        ));
    }
    states
}

/// Replace, on every sample where `a` or `gap` lies outside its inlier band, both by their
/// central values; returns how many samples were replaced. Both are positive scales (an
/// amplitude ratio of a diagonal correlator, a gap), so the band is taken on their logarithms,
/// where their skewed but genuine tails are symmetric and a jump is a large factor; where a
/// value is not positive throughout, on the value itself.
fn central_where_jumped(a: &mut Resampled, gap: &mut Resampled) -> usize {
    let (Some(in_a), Some(in_g)) = (scale_band(a), scale_band(gap)) else {
        return 0;
    };
    let mut n = 0;
    for (x, g) in a.samples.iter_mut().zip(gap.samples.iter_mut()) {
        if !(in_a(*x) && in_g(*g)) {
            *x = a.central;
            *g = gap.central;
            n += 1;
        }
    }
    n
}

/// The inlier test of a scale parameter: on its logarithm when it is positive throughout.
fn scale_band(v: &Resampled) -> Option<Box<dyn Fn(f64) -> bool>> {
    if v.central > 0.0 && v.samples.iter().all(|&x| x > 0.0) {
        let band = v.map(f64::ln).inlier_band()?;
        Some(Box::new(move |x: f64| band(x.ln())))
    } else {
        let band = v.inlier_band()?;
        Some(Box::new(band))
    }
}

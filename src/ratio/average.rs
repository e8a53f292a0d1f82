//! Averaging of equivalent channels before any fit (common practice): channels in the same
//! Q² shell whose kinematic factors agree up to a sign carry the same matrix element, so the
//! sign-weighted mean of their ratios, `R_avg = (1/n) sum_k s_k R_k`, has the matrix element
//! of the first channel with smaller noise. Which channels are equivalent, and the signs,
//! come from the caller (the kinematics stage computes the kinematic factors); this module
//! only averages, resample by resample, which keeps the correlations.

use super::{ChannelKey, ChannelRatio, NegativeRootCount, RatioPoint, ReIm, STAGE};
use crate::{Error, Result};
use std::collections::BTreeMap;

/// Average the ratios of `group` (each channel with its sign, `+1` or `-1`). The result
/// carries the first member's key. Every member must exist and have the same `(tsep, tau)`
/// points; otherwise an error names the offending channel.
pub fn average_channels(
    ratios: &BTreeMap<ChannelKey, ChannelRatio>,
    group: &[(ChannelKey, f64)],
) -> Result<ChannelRatio> {
    let Some((lead_key, _)) = group.first() else {
        return Err(Error::analysis(
            STAGE,
            "averaging equivalent channels: the group is empty",
        ));
    };
    let mut members = Vec::with_capacity(group.len());
    for (key, sign) in group {
        let ratio = ratios.get(key).ok_or_else(|| {
            Error::analysis(
                STAGE,
                format!("averaging with {lead_key}: no ratio for channel {key}"),
            )
        })?;
        if !(sign.is_finite() && *sign != 0.0) {
            return Err(Error::analysis(
                STAGE,
                format!("averaging with {lead_key}: the sign of channel {key} is {sign}; expected +1 or -1"),
            ));
        }
        members.push((ratio, *sign));
    }
    // safe: `group` is non-empty (checked above) and every member was pushed.
    let lead = members[0].0;
    for (ratio, _) in &members[1..] {
        let same = ratio.points.len() == lead.points.len()
            && ratio
                .points
                .iter()
                .zip(&lead.points)
                .all(|(a, b)| (a.tsep, a.tau) == (b.tsep, b.tau));
        if !same {
            return Err(Error::analysis(
                STAGE,
                format!(
                    "averaging channel {} with {lead_key}: their (tsep, tau) points differ; \
                     equivalent channels must be measured at the same points",
                    ratio.key
                ),
            ));
        }
    }
    let n = members.len() as f64;
    let points = lead
        .points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let mut re = p.value.re.map(|_| 0.0);
            let mut im = re.clone();
            for (ratio, sign) in &members {
                let v = &ratio.points[i].value;
                re = &re + &(&v.re * (*sign / n));
                im = &im + &(&v.im * (*sign / n));
            }
            RatioPoint::new(p.tsep, p.tau, ReIm { re, im })
        })
        .collect();
    let mut negative_root = NegativeRootCount::default();
    for (ratio, _) in &members {
        negative_root.samples += ratio.negative_root.samples;
        negative_root.points_affected += ratio.negative_root.points_affected;
        negative_root.points_dropped += ratio.negative_root.points_dropped;
    }
    Ok(ChannelRatio {
        key: lead_key.clone(),
        points,
        negative_root,
        n_bins: lead.n_bins,
        c2_source: lead.c2_source.clone(),
        c2_sink: lead.c2_sink.clone(),
    })
}

//! The per-channel driver: plateau at every `tsep`, summation, two-state, cross-check and the
//! final estimate chosen by the `final_method` [`Estimator`]. A method that cannot run on a channel (one
//! separation only, no two-point parameters, a fit that does not converge, ...) is skipped with
//! a note; a channel is an error only when no method runs. When the `final_method` is among the
//! skipped, the next of two-state, summation and plateau stands in for the channel's final
//! estimate (its ratio plot), with a note; a final method that runs on no channel at all is an
//! error (a setting that does not fit the data).

use super::crosscheck::{cross_check, CrossCheckRow};
use super::plateau::{plateau, PlateauFit};
use super::summation::{summation, SummationFit};
use super::two_state::{two_state_with_late, DesignMemo, TwoPointStates, TwoStateFit};
use super::{
    ChannelKey, ChannelRatio, Estimator, RatioSettings, RatioSummary, ReIm, ReImFit, STAGE,
};
use crate::data::Momentum;
use crate::{Error, Result};
use serde::Serialize;
use std::collections::BTreeMap;

/// Everything the ratio stage knows about one channel.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ChannelResult {
    /// The channel.
    pub key: ChannelKey,
    /// The ratio at every `(tsep, tau)`, summarised (central value and error; the resamples
    /// are dropped once the fits are done).
    pub ratio: RatioSummary,
    /// Plateau fits, one per separation that has points inside the `tau_cut` window.
    pub plateaus: Vec<PlateauFit>,
    /// Summation estimate, if it could run.
    pub summation: Option<SummationFit>,
    /// Two-state estimate, if it could run.
    pub two_state: Option<TwoStateFit>,
    /// The two-state fit without its smallest separation ([`Estimator::TwoStateLate`]), when
    /// `excited_states.two_state_late` asks for it and the two-state fit ran on at least three
    /// separations.
    pub two_state_late: Option<TwoStateFit>,
    /// Every comparison between the methods.
    pub crosscheck: Vec<CrossCheckRow>,
    /// The estimator that feeds the final result (a plateau with its `tsep`).
    pub final_method: Estimator,
    /// The final (bare) matrix element.
    pub final_estimate: ReIm,
    /// Why a method was skipped, one line each.
    pub notes: Vec<String>,
}

/// Run every excited-state method on one channel's ratio.
pub fn analyse_channel(
    ratio: ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
) -> Result<ChannelResult> {
    analyse_channel_with(ratio, states, settings, &mut DesignMemo::new(states))
}

/// [`analyse_channel`] with the two-state designs of the previous channel kept in `memo` (a
/// channel of the same momenta and points reuses them; the results are the same bits).
pub(crate) fn analyse_channel_with(
    ratio: ChannelRatio,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    memo: &mut DesignMemo<'_, BTreeMap<Momentum, TwoPointStates>>,
) -> Result<ChannelResult> {
    let mut notes = Vec::new();
    let mut plateaus = Vec::new();
    for tsep in ratio.tseps() {
        match plateau(&ratio, tsep, settings) {
            Ok(p) => plateaus.push(p),
            Err(e) => notes.push(e.to_string()),
        }
    }
    let summation = summation(&ratio, settings)
        .map_err(|e| notes.push(e.to_string()))
        .ok();
    let (two_state, late) = two_state_with_late(&ratio, states, settings, memo);
    let two_state = two_state.map_err(|e| notes.push(e.to_string())).ok();
    let two_state_late = late.and_then(|r| {
        r.map_err(|e| notes.push(format!("{TWO_STATE_LATE_NOTE}: {e}")))
            .ok()
    });
    let crosscheck = cross_check(&plateaus, summation.as_ref(), two_state.as_ref());
    let fits = Fits {
        plateaus: &plateaus,
        summation: &summation,
        two_state: &two_state,
        two_state_late: &two_state_late,
    };
    let Some((final_method, fit)) = choose(fits, settings, &mut notes) else {
        return Err(Error::analysis(
            STAGE,
            format!(
                "channel {}: no excited-state method could run ({})",
                ratio.key,
                if notes.is_empty() {
                    "no data".to_string()
                } else {
                    notes.join("; ")
                }
            ),
        ));
    };
    let final_estimate = fit.value.clone();
    Ok(ChannelResult {
        key: ratio.key.clone(),
        ratio: ratio.summary(),
        plateaus,
        summation,
        two_state,
        two_state_late,
        crosscheck,
        final_method,
        final_estimate,
        notes,
    })
}

/// The channel's final estimate: the `final_method`'s, or, when it could not run on this
/// channel (e.g. a two-state fit that did not converge), the first that did among two-state,
/// summation and the plateau at the largest `tsep`, with a note saying so. The channel's
/// other estimates are unaffected: each method's form factors use the channels it ran on.
fn choose<'a>(
    fits: Fits<'a>,
    settings: &RatioSettings,
    notes: &mut Vec<String>,
) -> Option<(Estimator, &'a ReImFit)> {
    let wanted = settings.final_method;
    if let Some(found) = pick(fits, wanted) {
        return Some(found);
    }
    let fallback = [
        Estimator::TwoState,
        Estimator::Summation,
        Estimator::Plateau { tsep: None },
    ]
    .into_iter()
    .find_map(|e| pick(fits, e))?;
    notes.push(format!(
        "the final method `{wanted}` could not run, so `{}` stands in for it in this \
         channel's ratio plot",
        fallback.0
    ));
    Some(fallback)
}

/// The fit of estimator `e` among a channel's fits, made concrete (`plateau`: the largest
/// `tsep` with a fit).
fn pick(fits: Fits<'_>, e: Estimator) -> Option<(Estimator, &ReImFit)> {
    match e {
        Estimator::Plateau { tsep: None } => fits
            .plateaus
            .last()
            .map(|p| (Estimator::plateau_at(p.tsep), &p.fit)),
        Estimator::Plateau { tsep: Some(t) } => fits
            .plateaus
            .iter()
            .find(|p| p.tsep == t)
            .map(|p| (e, &p.fit)),
        Estimator::Summation => fits.summation.as_ref().map(|s| (e, &s.slope)),
        Estimator::TwoState => fits.two_state.as_ref().map(|t| (e, &t.m)),
        Estimator::TwoStateLate => fits.two_state_late.as_ref().map(|t| (e, &t.m)),
    }
}

/// A channel's fits, as [`pick`] looks them up.
#[derive(Clone, Copy)]
struct Fits<'a> {
    plateaus: &'a [PlateauFit],
    summation: &'a Option<SummationFit>,
    two_state: &'a Option<TwoStateFit>,
    two_state_late: &'a Option<TwoStateFit>,
}

/// Prefix of the note when the two-state fit without its smallest separation fails.
const TWO_STATE_LATE_NOTE: &str = "two-state fit without its smallest separation";

impl ChannelResult {
    /// The fit of one estimator, with the estimator made concrete (`plateau` is the plateau
    /// at the largest `tsep` with a fit); `None` when it did not run on this channel.
    pub fn estimate(&self, e: Estimator) -> Option<(Estimator, &ReImFit)> {
        let fits = Fits {
            plateaus: &self.plateaus,
            summation: &self.summation,
            two_state: &self.two_state,
            two_state_late: &self.two_state_late,
        };
        pick(fits, e)
    }

    /// Every estimate that ran, in estimator order.
    pub fn estimates(&self) -> Vec<(Estimator, &ReImFit)> {
        let mut out: Vec<_> = self
            .plateaus
            .iter()
            .map(|p| (Estimator::plateau_at(p.tsep), &p.fit))
            .collect();
        out.extend(self.estimate(Estimator::Summation));
        out.extend(self.estimate(Estimator::TwoState));
        out.extend(self.estimate(Estimator::TwoStateLate));
        out
    }
}

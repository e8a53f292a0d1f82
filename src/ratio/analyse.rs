//! The per-channel driver: plateau at every `tsep`, summation, two-state, cross-check and the
//! final estimate chosen by [`FinalMethod`]. A method that cannot run on a channel (one
//! separation only, no two-point parameters, ...) is skipped with a note; only the method that
//! feeds the final result is required.

use super::crosscheck::{cross_check, CrossCheckRow};
use super::plateau::{plateau, PlateauFit};
use super::summation::{summation, SummationFit};
use super::two_state::{two_state, TwoPointStates, TwoStateFit};
use super::{build_ratios, ChannelKey, ChannelRatio, FinalMethod, RatioSettings, ReIm, STAGE};
use crate::data::{Momentum, ThreePointData, TwoPointData};
use crate::resample::ResamplePlan;
use crate::{Error, Result};
use rayon::prelude::*;
use serde::Serialize;
use std::collections::BTreeMap;

/// Everything the ratio stage knows about one channel.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ChannelResult {
    /// The channel.
    pub key: ChannelKey,
    /// The ratio at every `(tsep, tau)`.
    pub ratio: ChannelRatio,
    /// Plateau fits, one per separation that has points inside the `tau_cut` window.
    pub plateaus: Vec<PlateauFit>,
    /// Summation estimate, if it could run.
    pub summation: Option<SummationFit>,
    /// Two-state estimate, if it could run.
    pub two_state: Option<TwoStateFit>,
    /// Every comparison between the methods.
    pub crosscheck: Vec<CrossCheckRow>,
    /// The method that feeds the final result.
    pub final_method: FinalMethod,
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
    let two_state = two_state(&ratio, states, settings)
        .map_err(|e| notes.push(e.to_string()))
        .ok();
    let crosscheck = cross_check(&plateaus, summation.as_ref(), two_state.as_ref());
    let chosen = match settings.final_method {
        FinalMethod::TwoState => two_state.as_ref().map(|t| &t.m.value),
        FinalMethod::Summation => summation.as_ref().map(|s| &s.slope.value),
        FinalMethod::PlateauLargestTsep => plateaus.last().map(|p| &p.fit.value),
    };
    let final_estimate = chosen.cloned().ok_or_else(|| {
        Error::analysis(
            STAGE,
            format!(
                "channel {}: the final method {:?} could not run ({})",
                ratio.key,
                settings.final_method,
                if notes.is_empty() {
                    "no data".to_string()
                } else {
                    notes.join("; ")
                }
            ),
        )
    })?;
    Ok(ChannelResult {
        key: ratio.key.clone(),
        ratio,
        plateaus,
        summation,
        two_state,
        crosscheck,
        final_method: settings.final_method,
        final_estimate,
        notes,
    })
}

/// Build the ratios of every channel and analyse each (channels in parallel; the results do
/// not depend on the number of threads). The first failing channel's error is returned.
pub fn analyse_all(
    c3: &ThreePointData,
    c2: &TwoPointData,
    plan: &ResamplePlan,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
) -> Result<BTreeMap<ChannelKey, ChannelResult>> {
    let ratios: Vec<ChannelRatio> = build_ratios(c3, c2, plan, settings)?
        .into_values()
        .collect();
    let results: Vec<Result<ChannelResult>> = ratios
        .into_par_iter()
        .map(|r| analyse_channel(r, states, settings))
        .collect();
    results
        .into_iter()
        .map(|r| r.map(|c| (c.key.clone(), c)))
        .collect()
}

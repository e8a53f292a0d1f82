//! The ratio stage over all channels, one channel at a time: a channel's ratio is built from
//! its three-point series, fitted by every excited-state method and reduced to what the
//! outputs read ([`super::RatioSummary`]) before the next channel on the same thread starts,
//! so the resampled ratio of all channels never exists at once. [`analyse_all_consuming`]
//! also takes ownership of the tables and drops each three-point series once its ratio is
//! built and each two-point series once its means are taken: the run's peak memory is then the
//! data, not the data plus their ratios (production mock, 1000 configurations: the ratio
//! points alone are 147 MB, as much as the three-point data).
//!
//! Channels run in parallel; the results, and which error is returned when several channels
//! fail, are those of building every ratio first ([`super::build_ratios`], the first failing
//! series in the table's key order) and analysing afterwards (the first failing channel in
//! channel order), whatever the number of threads.

use super::analyse::{analyse_channel_with, ChannelResult};
use super::build::{add_points, check_bins, TwoPointMeans, TwoPointSource};
use super::factors::Factors;
use super::two_state::DesignMemo;
use super::{ChannelKey, ChannelRatio, Estimator, RatioSettings, TwoPointStates, STAGE};
use crate::data::{Momentum, Series, ThreePointData, ThreePointKey, TwoPointData};
use crate::resample::ResamplePlan;
use crate::{Error, Result};
use rayon::prelude::*;
use std::borrow::Borrow;
use std::collections::BTreeMap;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Build the ratios of every channel and analyse each (channels in parallel; the results do
/// not depend on the number of threads). The first failing channel's error is returned.
pub fn analyse_all(
    c3: &ThreePointData,
    c2: &TwoPointData,
    plan: &ResamplePlan,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
) -> Result<BTreeMap<ChannelKey, ChannelResult>> {
    analyse_all_with_progress(c3, c2, plan, states, settings, &|_, _| {})
}

/// [`analyse_all`], calling `progress(done, total)` as channels finish (in any order, from
/// any thread; the results do not depend on it).
pub fn analyse_all_with_progress(
    c3: &ThreePointData,
    c2: &TwoPointData,
    plan: &ResamplePlan,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<BTreeMap<ChannelKey, ChannelResult>> {
    check_bins(c3, c2, plan)?;
    let grouped = group(&c3.channels, TwoPointSource::Borrowed(c2), plan, settings);
    analyse_grouped(grouped, plan, states, settings, progress)
}

/// [`analyse_all_with_progress`] on tables it owns: each two-point series is dropped once
/// the means the ratios divide by are taken from it (the series no channel uses once all
/// channels are grouped), each three-point series once its ratio is built.
/// The same results, bit for bit.
pub fn analyse_all_consuming(
    c3: ThreePointData,
    c2: TwoPointData,
    plan: &ResamplePlan,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<BTreeMap<ChannelKey, ChannelResult>> {
    check_bins(&c3, &c2, plan)?;
    let grouped = group(c3.channels, TwoPointSource::Owned(c2), plan, settings);
    analyse_grouped(grouped, plan, states, settings, progress)
}

/// One channel's input: its ratio without points (sharing the two-point means at its
/// momenta) and its three-point series, each with its position in the table's key order
/// and its `tsep`.
struct ChannelInput<S> {
    ratio: ChannelRatio,
    series: Vec<(usize, u32, S)>,
}

/// The table's series grouped by channel (in channel order), and the first series that
/// failed a check (its position in key order and the error); series after it are left out,
/// as [`super::build_ratios`] stops there.
struct Grouped<S> {
    channels: Vec<ChannelInput<S>>,
    failed: Option<(usize, Error)>,
}

/// Check every series in key order, take the two-point means at its momenta, and group the
/// series by channel.
fn group<K, S>(
    series: impl IntoIterator<Item = (K, S)>,
    c2: TwoPointSource<'_>,
    plan: &ResamplePlan,
    settings: &RatioSettings,
) -> Grouped<S>
where
    K: Borrow<ThreePointKey>,
    S: Borrow<Series>,
{
    let mut two_point = TwoPointMeans::new(c2, plan, settings.two_point_smear.clone());
    let mut channels: BTreeMap<ChannelKey, ChannelInput<S>> = BTreeMap::new();
    let mut failed = None;
    for (i, (key3, s)) in series.into_iter().enumerate() {
        let key3 = key3.borrow();
        let key = ChannelKey::of(key3);
        if let Err(e) = two_point.prepare(key3, s.borrow(), &key) {
            failed = Some((i, e));
            break;
        }
        channels
            .entry(key)
            .or_insert_with_key(|key| ChannelInput {
                ratio: two_point.empty_ratio(key),
                series: Vec::new(),
            })
            .series
            .push((i, key3.tsep, s));
    }
    Grouped {
        channels: channels.into_values().collect(),
        failed,
    }
}

/// What became of one channel.
enum Outcome {
    /// Building its ratio failed at the series at this position in key order.
    BuildFailed(usize, Error),
    /// Built but not analysed: an earlier series failed a check, so the stage fails.
    NotAnalysed,
    /// Built and analysed.
    Analysed(Result<Box<ChannelResult>>),
}

/// Build, analyse and summarise every channel in parallel; the error returned is the first
/// failing series in key order, else the first failing channel in channel order.
fn analyse_grouped<S: Borrow<Series> + Send>(
    grouped: Grouped<S>,
    plan: &ResamplePlan,
    states: &BTreeMap<Momentum, TwoPointStates>,
    settings: &RatioSettings,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<BTreeMap<ChannelKey, ChannelResult>> {
    let Grouped { channels, failed } = grouped;
    let checks_passed = failed.is_none();
    let total = channels.len();
    let done = AtomicUsize::new(0);
    let factors = Factors::default();
    progress(0, total);
    // Each piece of work keeps the last channel's two-state designs for the next (channels of
    // one momentum pair are neighbours in channel order); the results do not depend on it.
    let outcomes: Vec<Outcome> = channels
        .into_par_iter()
        .map_init(
            || DesignMemo::new(states),
            |memo, input| {
                let ChannelInput { mut ratio, series } = input;
                for (i, tsep, s) in series {
                    if let Err(e) =
                        add_points(&mut ratio, tsep, s.borrow(), plan, settings, &factors)
                    {
                        return Outcome::BuildFailed(i, e);
                    }
                }
                ratio.sort_points();
                if !checks_passed {
                    return Outcome::NotAnalysed;
                }
                let out = analyse_channel_with(ratio, states, settings, memo).map(Box::new);
                progress(done.fetch_add(1, Ordering::Relaxed) + 1, total);
                Outcome::Analysed(out)
            },
        )
        .collect();
    let first_build_error = outcomes
        .iter()
        .filter_map(|o| match o {
            Outcome::BuildFailed(i, _) => Some(*i),
            _ => None,
        })
        .chain(failed.as_ref().map(|(i, _)| *i))
        .min();
    if let Some(first) = first_build_error {
        let built = outcomes.into_iter().find_map(|o| match o {
            Outcome::BuildFailed(i, e) if i == first => Some(e),
            _ => None,
        });
        return Err(built
            .or(failed.map(|(_, e)| e))
            .unwrap_or_else(|| Error::analysis(STAGE, "a three-point series could not be used")));
    }
    let channels: BTreeMap<ChannelKey, ChannelResult> = outcomes
        .into_iter()
        .filter_map(|o| match o {
            Outcome::Analysed(r) => Some(r.map(|c| (c.key.clone(), *c))),
            _ => None,
        })
        .collect::<Result<_>>()?;
    final_method_ran_somewhere(&channels, settings.final_method)?;
    Ok(channels)
}

/// A final method that could run on no channel at all is a setting that does not fit the
/// data (e.g. `summation` with one separation), not a channel's accident: an error that says
/// why, with the first channel's reason.
fn final_method_ran_somewhere(
    channels: &BTreeMap<ChannelKey, ChannelResult>,
    wanted: Estimator,
) -> Result<()> {
    if channels.is_empty() || channels.values().any(|c| wanted.selects(c.final_method)) {
        return Ok(());
    }
    let first = channels.values().next().map(|c| c.notes.join("; "));
    Err(Error::analysis(
        STAGE,
        format!(
            "the final method `{wanted}` could not run on any channel ({})",
            first.unwrap_or_default()
        ),
    ))
}

//! Construction of the ratio of docs/methods.md §3 per resample.
//!
//! The resampled means of `C3` (real and imaginary parts) and of the real two-point functions at
//! `p_f` and `p_i = p_f - q` are formed first; the non-linear ratio
//!
//! ```text
//! R(tsep, tau) = C3(tsep, tau) / C2_f(tsep)
//!              * sqrt( C2_i(tsep - tau) C2_f(tau) C2_f(tsep) / (C2_f(tsep - tau) C2_i(tau) C2_i(tsep)) )
//! ```
//!
//! is then evaluated on the central value and on every sample. For `p_f = p_i` the root is 1
//! exactly and `R = C3 / C2(tsep)`. A negative product under the root is handled by
//! [`NegativeRootPolicy`] and counted per channel; a non-finite ratio (a two-point function
//! that is zero) is an error naming the channel.

use super::factors::Factors;
use super::lsq::{CovarianceSetup, PointKept};
use super::{ChannelKey, NegativeRootPolicy, RatioSettings, ReIm, STAGE};
use crate::data::{
    momentum_text, Momentum, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use crate::resample::{ResamplePlan, Resampled, Summary};
use crate::{Error, Result};
use serde::Serialize;
use std::collections::BTreeMap;
use std::sync::Arc;

/// The ratio at one `(tsep, tau)`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RatioPoint {
    /// Source–sink separation.
    pub tsep: u32,
    /// Insertion time, `0 <= tau <= tsep`.
    pub tau: u32,
    /// Real and imaginary parts of the ratio.
    pub value: ReIm,
    /// What the channel's fits of this point keep of `value` (its jackknife scales and
    /// diagonal variance).
    #[serde(skip)]
    pub(crate) kept: PointKept,
}

impl RatioPoint {
    /// The ratio `value` at `(tsep, tau)`.
    pub fn new(tsep: u32, tau: u32, value: ReIm) -> Self {
        RatioPoint {
            tsep,
            tau,
            value,
            kept: PointKept::default(),
        }
    }
}

/// How often the product under the root was negative in one channel.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct NegativeRootCount {
    /// Values (central or samples, summed over all points) with a negative product.
    pub samples: usize,
    /// `(tsep, tau)` points with at least one negative value.
    pub points_affected: usize,
    /// Points dropped under [`NegativeRootPolicy::DropPoint`].
    pub points_dropped: usize,
}

/// The ratio of one channel at every `tsep` and `tau` it has.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ChannelRatio {
    /// The channel.
    pub key: ChannelKey,
    /// Ratio points ordered by `(tsep, tau)`, contact points included.
    pub points: Vec<RatioPoint>,
    /// Negative-root diagnostics.
    pub negative_root: NegativeRootCount,
    /// Number of independent bins the resamples were drawn from (for covariance estimates).
    pub n_bins: usize,
    /// Resampled two-point means at the source momentum (`t = 0..T`) that divided `C3`;
    /// used by the joint two-state fit, not serialized. Shared by every channel with this
    /// momentum (one copy per momentum, not per channel).
    #[serde(skip)]
    pub c2_source: Arc<[Resampled]>,
    /// Resampled two-point means at the sink momentum (shared likewise).
    #[serde(skip)]
    pub c2_sink: Arc<[Resampled]>,
}

impl ChannelRatio {
    /// The separations present, ascending.
    pub fn tseps(&self) -> Vec<u32> {
        distinct_tseps(self.points.iter().map(|p| p.tsep))
    }

    /// The points of separation `tsep` with `tau_cut <= tau <= tsep - tau_cut`.
    pub fn fit_points(&self, tsep: u32, tau_cut: u32) -> Vec<&RatioPoint> {
        self.points
            .iter()
            .filter(|p| p.tsep == tsep && p.tau >= tau_cut && p.tau + tau_cut <= p.tsep)
            .collect()
    }

    /// Order the points by `(tsep, tau)` (a stable sort: points of equal `(tsep, tau)` keep
    /// the order they were added in).
    pub(super) fn sort_points(&mut self) {
        self.points.sort_by_key(|p| (p.tsep, p.tau));
    }

    /// The covariance setup of fits to this channel's points.
    pub(crate) fn covariance<'a>(&self, settings: &'a RatioSettings) -> CovarianceSetup<'a> {
        CovarianceSetup {
            options: &settings.covariance,
            n_bins: self.n_bins,
        }
    }
}

/// What the outputs read of one ratio point once the channel's fits are done: `(tsep, tau)`
/// and each part's central value and error.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct PointSummary {
    /// Source–sink separation.
    pub tsep: u32,
    /// Insertion time.
    pub tau: u32,
    /// The real part's summary.
    pub re: Summary,
    /// The imaginary part's summary.
    pub im: Summary,
}

/// What a channel's ratio leaves behind once its fits are done (the resamples of its points
/// are needed by the fits only, and at 1000 configurations would be as large as the raw
/// three-point data): every point's summary and the negative-root counts.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RatioSummary {
    /// Point summaries ordered by `(tsep, tau)`, as [`ChannelRatio::points`].
    pub points: Vec<PointSummary>,
    /// Negative-root diagnostics.
    pub negative_root: NegativeRootCount,
}

impl RatioSummary {
    /// The separations present, ascending.
    pub fn tseps(&self) -> Vec<u32> {
        distinct_tseps(self.points.iter().map(|p| p.tsep))
    }
}

/// The distinct separations of points ordered by `(tsep, tau)`.
fn distinct_tseps(tseps: impl Iterator<Item = u32>) -> Vec<u32> {
    let mut t: Vec<u32> = tseps.collect();
    t.dedup();
    t
}

impl ChannelRatio {
    /// The summary the outputs keep of this ratio.
    pub fn summary(&self) -> RatioSummary {
        RatioSummary {
            points: self
                .points
                .iter()
                .map(|p| PointSummary {
                    tsep: p.tsep,
                    tau: p.tau,
                    re: p.value.re.summary(),
                    im: p.value.im.summary(),
                })
                .collect(),
            negative_root: self.negative_root,
        }
    }
}

/// Build the ratio of every channel of `c3` from binned data. `c2` must hold the two-point
/// function at every sink and source momentum (with interpolator
/// `settings.two_point_smear`), on the same bins as `c3`.
pub fn build_ratios(
    c3: &ThreePointData,
    c2: &TwoPointData,
    plan: &ResamplePlan,
    settings: &RatioSettings,
) -> Result<BTreeMap<ChannelKey, ChannelRatio>> {
    check_bins(c3, c2, plan)?;
    let mut two_point = TwoPointMeans::new(
        TwoPointSource::Borrowed(c2),
        plan,
        settings.two_point_smear.clone(),
    );
    let mut out: BTreeMap<ChannelKey, ChannelRatio> = BTreeMap::new();
    let factors = Factors::default();
    for (key3, series) in &c3.channels {
        let key = ChannelKey::of(key3);
        two_point.prepare(key3, series, &key)?;
        let entry = out
            .entry(key)
            .or_insert_with_key(|key| two_point.empty_ratio(key));
        add_points(entry, key3.tsep, series, plan, settings, &factors)?;
    }
    for ratio in out.values_mut() {
        ratio.sort_points();
    }
    Ok(out)
}

/// Both tables must be on the plan's bins and on the same configurations.
pub(super) fn check_bins(
    c3: &ThreePointData,
    c2: &TwoPointData,
    plan: &ResamplePlan,
) -> Result<()> {
    let n_bins = plan.n_bins();
    if c3.configs.len() != n_bins || c2.configs.len() != n_bins {
        return Err(Error::analysis(
            STAGE,
            format!(
                "the resample plan expects {n_bins} bins but the three-point data have {} and the \
                 two-point data {}; bin both tables with the plan's bin size",
                c3.configs.len(),
                c2.configs.len()
            ),
        ));
    }
    if c3.configs != c2.configs {
        return Err(Error::analysis(
            STAGE,
            "the three-point and two-point data are on different configurations (or bins); \
             both must share the same list",
        ));
    }
    Ok(())
}

/// Append the ratio at every `tau = 0..=tsep` of one three-point series (checked by
/// [`TwoPointMeans::prepare`]) to its channel's ratio, whose two-point means it divides by.
pub(super) fn add_points(
    entry: &mut ChannelRatio,
    tsep: u32,
    series: &Series,
    plan: &ResamplePlan,
    settings: &RatioSettings,
    factors: &Factors,
) -> Result<()> {
    let (c2i, c2f) = (entry.c2_source.clone(), entry.c2_sink.clone());
    let key = &entry.key;
    let row = factors.get((key.source_momentum(), key.pf), tsep, &c2i, &c2f);
    for (tau, point) in (0..=tsep).zip(row.iter()) {
        let t = tau as usize;
        if point.negatives > 0 {
            entry.negative_root.samples += point.negatives;
            entry.negative_root.points_affected += 1;
            if settings.negative_root == NegativeRootPolicy::DropPoint && point.central_negative {
                entry.negative_root.points_dropped += 1;
                continue;
            }
        }
        let c3re = plan.mean(series.re_at(t));
        let c3im = plan.mean(series.im_at(t));
        let value = ReIm {
            re: &c3re * &point.factor,
            im: &c3im * &point.factor,
        };
        if !value.re.is_finite() || !value.im.is_finite() {
            return Err(Error::analysis(
                STAGE,
                format!(
                    "channel {key}, tsep {tsep}, tau {tau}: the ratio is not finite (a \
                     two-point function at p_f={:?} or p_i={:?} is zero or not finite)",
                    key.pf,
                    key.source_momentum()
                ),
            ));
        }
        entry.points.push(RatioPoint::new(tsep, tau, value));
    }
    Ok(())
}

fn check_series(series: &Series, n_bins: usize, tsep: u32, key: &ChannelKey) -> Result<()> {
    if series.n_cfg != n_bins || series.re.len() != series.n_t * n_bins {
        return Err(Error::analysis(
            STAGE,
            format!(
                "channel {key}, tsep {tsep}: the series has {} configurations and {} values; \
                 expected {n_bins} bins per insertion time",
                series.n_cfg,
                series.re.len()
            ),
        ));
    }
    if series.n_t != tsep as usize + 1 || series.im.len() != series.re.len() {
        return Err(Error::analysis(
            STAGE,
            format!(
                "channel {key}, tsep {tsep}: the series has {} insertion times; expected tau = \
                 0..={tsep} ({} values): tau outside [0, tsep] is unphysical",
                series.n_t,
                tsep + 1
            ),
        ));
    }
    Ok(())
}

/// The two-point table the means are taken from: borrowed, or owned and emptied as they are
/// taken (each series is read once: its means are cached).
pub(super) enum TwoPointSource<'a> {
    /// The caller keeps the table.
    Borrowed(&'a TwoPointData),
    /// Each series is dropped once its means are taken.
    Owned(TwoPointData),
}

/// Resampled means of the two-point functions, computed once per momentum.
pub(super) struct TwoPointMeans<'a> {
    c2: TwoPointSource<'a>,
    plan: &'a ResamplePlan,
    smear: Option<String>,
    cache: BTreeMap<Momentum, Arc<[Resampled]>>,
}

impl<'a> TwoPointMeans<'a> {
    pub(super) fn new(
        c2: TwoPointSource<'a>,
        plan: &'a ResamplePlan,
        smear: Option<String>,
    ) -> Self {
        TwoPointMeans {
            c2,
            plan,
            smear,
            cache: BTreeMap::new(),
        }
    }

    /// Check one three-point series of channel `key` and compute the two-point means at its
    /// sink and source momenta (once per momentum), which must reach its `tsep`.
    pub(super) fn prepare(
        &mut self,
        key3: &ThreePointKey,
        series: &Series,
        key: &ChannelKey,
    ) -> Result<()> {
        check_series(series, self.plan.n_bins(), key3.tsep, key)?;
        self.load(key.pf, key3.tsep, key)?;
        self.load(key.source_momentum(), key3.tsep, key)
    }

    /// A channel's ratio without points, sharing the two-point means at its momenta (after
    /// [`Self::prepare`]).
    pub(super) fn empty_ratio(&self, key: &ChannelKey) -> ChannelRatio {
        ChannelRatio {
            key: key.clone(),
            points: Vec::new(),
            negative_root: NegativeRootCount::default(),
            n_bins: self.plan.n_bins(),
            c2_source: self.shared(key.source_momentum()),
            c2_sink: self.shared(key.pf),
        }
    }

    /// The two-point means at momentum `p` (after a successful [`Self::load`]).
    fn means(&self, p: Momentum) -> &[Resampled] {
        self.cache.get(&p).map_or(&[], |m| &m[..])
    }

    /// The shared two-point means at momentum `p` (empty before [`Self::load`]).
    fn shared(&self, p: Momentum) -> Arc<[Resampled]> {
        self.cache
            .get(&p)
            .cloned()
            .unwrap_or_else(|| Arc::from(Vec::new()))
    }

    /// Compute the two-point means at momentum `p` and check that they reach `tsep`.
    fn load(&mut self, p: Momentum, tsep: u32, channel: &ChannelKey) -> Result<()> {
        if !self.cache.contains_key(&p) {
            let key = TwoPointKey {
                momentum: p,
                smear: self.smear.clone(),
                ops: None,
            };
            let taken;
            let series = match &mut self.c2 {
                TwoPointSource::Borrowed(c2) => c2.channels.get(&key),
                TwoPointSource::Owned(c2) => {
                    taken = c2.channels.remove(&key);
                    taken.as_ref()
                }
            };
            let series = series.ok_or_else(|| {
                Error::analysis(
                    STAGE,
                    format!(
                        "channel {channel}: no two-point function at momentum {} (interpolator \
                         {}); the ratio needs C2 at p_f={} and p_i=p_f-q={}",
                        momentum_text(p),
                        self.smear.as_deref().unwrap_or("none"),
                        momentum_text(channel.pf),
                        momentum_text(channel.source_momentum())
                    ),
                )
            })?;
            if series.n_cfg != self.plan.n_bins() || series.re.len() != series.n_t * series.n_cfg {
                return Err(Error::analysis(
                    STAGE,
                    format!(
                        "two-point function at momentum {}: {} configurations, expected {} bins",
                        momentum_text(p),
                        series.n_cfg,
                        self.plan.n_bins()
                    ),
                ));
            }
            let means: Vec<Resampled> = (0..series.n_t)
                .map(|t| self.plan.mean(series.re_at(t)))
                .collect();
            let means = Arc::from(means);
            self.cache.insert(p, means);
        }
        let n_t = self.means(p).len();
        if n_t <= tsep as usize {
            return Err(Error::analysis(
                STAGE,
                format!(
                    "channel {channel}, tsep {tsep}: the two-point function at momentum {} has \
                     only {} time slices; the ratio needs t = 0..={tsep}",
                    momentum_text(p),
                    n_t
                ),
            ));
        }
        Ok(())
    }
}

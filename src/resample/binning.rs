//! Binning (blocking): averages of `b` consecutive configurations, so that the bins of an
//! autocorrelated Monte Carlo chain are nearly independent before jackknife or bootstrap
//! (docs/methods.md §7; Flyvbjerg & Petersen, J. Chem. Phys. 91 (1989) 461).
//!
//! With `N` configurations and bin size `b` there are `floor(N / b)` bins; bin `k` is the mean
//! of configurations `k b .. (k+1) b - 1`. The trailing `N mod b` configurations, which do not
//! fill a bin, are dropped and reported in [`BinReport`]. The configuration axis of binned data
//! is labelled by the first configuration number of each bin.

use crate::data::{Series, ThreePointData, TwoPointData};
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::fmt::Debug;

/// What binning did to the configuration axis.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct BinReport {
    /// Configurations per bin.
    pub bin_size: usize,
    /// Number of bins made.
    pub n_bins: usize,
    /// Configuration numbers dropped at the end because they did not fill a bin.
    pub dropped_configs: Vec<i64>,
}

/// Means of consecutive blocks of `b` values; the trailing `x.len() mod b` values are dropped.
/// Returns an empty vector when `b == 0` or `b > x.len()` (the data-level functions
/// [`bin_twopt`] and [`bin_threept`] report those as errors).
pub fn bin_values(x: &[f64], b: usize) -> Vec<f64> {
    if b == 0 {
        return Vec::new();
    }
    x.chunks_exact(b)
        .map(|c| c.iter().sum::<f64>() / b as f64)
        .collect()
}

/// Bin every time slice of a series (real and imaginary parts) with bin size `b`; the result
/// has `n_cfg / b` configurations. Returns an empty series (`n_cfg = 0`) when `b == 0` or
/// `b > n_cfg`.
pub fn bin_series(s: &Series, b: usize) -> Series {
    let n_bins = s.n_cfg.checked_div(b).unwrap_or(0);
    let mut out = Series::zeros(s.n_t, n_bins);
    if n_bins == 0 {
        return out;
    }
    for t in 0..s.n_t {
        out.re[t * n_bins..(t + 1) * n_bins].copy_from_slice(&bin_values(s.re_at(t), b));
        out.im[t * n_bins..(t + 1) * n_bins].copy_from_slice(&bin_values(s.im_at(t), b));
    }
    out
}

/// Check a bin size against `n_cfg` configurations and say what the binning will do.
/// Errors for `b == 0`, for `b > n_cfg`, and when fewer than two bins would remain (no
/// resampling is possible on one bin).
pub fn plan_bins(configs: &[i64], b: usize) -> Result<BinReport> {
    let n = configs.len();
    if n < 2 {
        return Err(Error::analysis(
            "resample",
            format!(
                "the data hold {n} configuration(s); resampling needs at least 2 (better many \
                 more)"
            ),
        ));
    }
    if b == 0 {
        return Err(Error::analysis(
            "resample",
            "bin size 0 is not allowed; use 1 for no binning",
        ));
    }
    if b > n {
        return Err(Error::analysis(
            "resample",
            format!("bin size {b} is larger than the number of configurations ({n})"),
        ));
    }
    let n_bins = n / b;
    if n_bins < 2 {
        return Err(Error::analysis(
            "resample",
            format!(
                "bin size {b} leaves {n_bins} bin of {n} configurations; resampling needs at \
                 least 2 bins (use a bin size of at most {})",
                n / 2
            ),
        ));
    }
    Ok(BinReport {
        bin_size: b,
        n_bins,
        dropped_configs: configs[n_bins * b..].to_vec(),
    })
}

fn bin_channels<K: Ord + Clone + Debug>(
    configs: &[i64],
    channels: &BTreeMap<K, Series>,
    b: usize,
) -> Result<(Vec<i64>, BTreeMap<K, Series>, BinReport)> {
    let report = check_channels(configs, channels, b)?;
    let out = channels
        .iter()
        .map(|(key, s)| (key.clone(), bin_series(s, b)))
        .collect();
    let first: Vec<i64> = configs
        .iter()
        .step_by(b)
        .take(report.n_bins)
        .copied()
        .collect();
    Ok((first, out, report))
}

/// [`plan_bins`], and every series checked against the configuration list.
fn check_channels<K: Debug>(
    configs: &[i64],
    channels: &BTreeMap<K, Series>,
    b: usize,
) -> Result<BinReport> {
    let report = plan_bins(configs, b)?;
    for (key, s) in channels {
        if s.n_cfg != configs.len() || s.re.len() != s.n_t * s.n_cfg || s.im.len() != s.re.len() {
            return Err(Error::analysis(
                "resample",
                format!(
                    "channel {key:?}: series has {} configurations ({} values) but the ensemble \
                     lists {} configurations",
                    s.n_cfg,
                    s.re.len(),
                    configs.len()
                ),
            ));
        }
    }
    Ok(report)
}

/// [`bin_twopt`] and [`bin_threept`] for tables that are not needed unbinned afterwards:
/// with `b == 1` each bin is its one configuration (the mean of one value is that value, bit
/// for bit), so the checked tables are returned as they are instead of copied.
pub fn bin_tables(
    two: TwoPointData,
    three: ThreePointData,
    b: usize,
) -> Result<(TwoPointData, ThreePointData, BinReport)> {
    if b != 1 {
        let (two, report) = bin_twopt(&{ two }, b)?;
        let (three, _) = bin_threept(&{ three }, b)?;
        return Ok((two, three, report));
    }
    let report = check_channels(&two.configs, &two.channels, b)?;
    check_channels(&three.configs, &three.channels, b)?;
    Ok((two, three, report))
}

/// Bin every two-point channel with bin size `b`. The configuration axis becomes the first
/// configuration number of each bin; trailing configurations are dropped and reported.
/// Errors for `b == 0`, `b > N`, fewer than two bins, or a channel whose series does not
/// match the configuration list.
pub fn bin_twopt(d: &TwoPointData, b: usize) -> Result<(TwoPointData, BinReport)> {
    let (configs, channels, report) = bin_channels(&d.configs, &d.channels, b)?;
    Ok((TwoPointData { configs, channels }, report))
}

/// Bin every three-point channel with bin size `b`; as [`bin_twopt`].
pub fn bin_threept(d: &ThreePointData, b: usize) -> Result<(ThreePointData, BinReport)> {
    let (configs, channels, report) = bin_channels(&d.configs, &d.channels, b)?;
    Ok((ThreePointData { configs, channels }, report))
}

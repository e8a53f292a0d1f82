//! Errors of binned data that are still autocorrelated.
//!
//! Binning by `b` configurations leaves autocorrelation between neighbouring bins unless the
//! bins are much longer than the integrated autocorrelation time. The error of a mean taken
//! from `N` bins as if they were independent is then short by `sqrt(2 τ_int)`, `τ_int` being
//! that of the *bins* (1/2 for independent bins). For an AR(1) chain with coefficient `ρ`
//! (unbinned `τ_int = (1+ρ)/(2(1-ρ))`), bins of 2 have `τ_int = 1/(2(1-ρ))` (analytic: the
//! error of the mean does not depend on the binning, and a bin of two has variance
//! `(1+ρ)/2` of one configuration's): at `ρ = 0.3` the bins carry 70 % of the true variance.
//!
//! [`measure`] estimates `τ_int` of the binned data by the Gamma method (Wolff, Comput. Phys.
//! Commun. 156 (2004) 143), pooled over every time slice of every channel of a table
//! ([`pooled_gamma_method`]), the two- and three-point tables separately. A single time
//! series of a few dozen bins gives `τ_int` only to about ±0.3; the pooled estimate is far
//! less noisy, at the price of assuming that the channels of one ensemble share their
//! autocorrelation (they come from the same Markov chain; the larger of the two tables'
//! values is used). [`decide`] applies the setting: inflate every resampled deviation by
//! `sqrt(2 τ_int)` (common practice for autocorrelated data; [`inflate`] scales each bin's
//! deviation from its time slice's mean, which scales every jackknife and bootstrap deviation
//! of every quantity computed from the data by the same factor) when `τ_int` exceeds 1/2 by
//! more than its error (`auto`), whenever it exceeds 1/2 (`always`, the default), or never.

use super::autocorr::{pooled_gamma_method, PooledAutocorr, DEFAULT_S};
use super::means::{stable_means_of, MEANS_AT_ONCE};
use crate::data::{Series, ThreePointData, TwoPointData};
use rayon::prelude::*;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// Above this `sqrt(2 τ_int)` a `τ_int` that is not significant is still mentioned (under
/// `auto`: errors 5 % short; under `always`: inflated by more than 5 %); a pooled estimate of
/// independent data stays well below it.
const POSSIBLE: f64 = 1.05;

/// When the resampled deviations are inflated for autocorrelation left in the bins
/// (`resampling.autocorrelation_inflation`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum Inflation {
    /// Inflate by `sqrt(2 tau_int)` when `tau_int` of the binned data exceeds 1/2 by more
    /// than its error.
    Auto,
    /// Inflate by `sqrt(2 tau_int)` whenever `tau_int` of the binned data exceeds 1/2 (the
    /// default: a few dozen bins rarely make the excess significant, yet it is real).
    #[default]
    Always,
    /// Never inflate (a warning still says when `auto` would have).
    Never,
}

impl Inflation {
    /// The YAML name.
    pub fn name(self) -> &'static str {
        match self {
            Inflation::Auto => "auto",
            Inflation::Always => "always",
            Inflation::Never => "never",
        }
    }
}

/// `τ_int` of the binned two- and three-point tables (each pooled over its time series), or
/// why it could not be measured.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct BinnedAutocorrelation {
    /// The two-point table.
    pub twopt: Result<PooledAutocorr, String>,
    /// The three-point table (every channel, real and imaginary parts).
    pub threept: Result<PooledAutocorr, String>,
}

impl BinnedAutocorrelation {
    /// The table with the larger `τ_int`, and its name.
    pub fn largest(&self) -> Option<(&'static str, &PooledAutocorr)> {
        let two = self.twopt.as_ref().ok().map(|r| ("two-point", r));
        let three = self.threept.as_ref().ok().map(|r| ("three-point", r));
        match (two, three) {
            (Some(a), Some(b)) => Some(if b.1.tau_int > a.1.tau_int { b } else { a }),
            (a, b) => a.or(b),
        }
    }
}

/// Measure `τ_int` of binned data (see the module docs). Either table may be empty.
pub fn measure(two: &TwoPointData, three: &ThreePointData) -> BinnedAutocorrelation {
    let two_chains: Vec<&[f64]> = two
        .channels
        .values()
        .flat_map(|s| (0..s.n_t).map(move |t| s.re_at(t)))
        .collect();
    let three_chains: Vec<&[f64]> = three
        .channels
        .values()
        .flat_map(|s| (0..s.n_t).flat_map(move |t| [s.re_at(t), s.im_at(t)]))
        .collect();
    let pooled = |chains: &[&[f64]]| {
        if chains.is_empty() {
            return Err("no data".to_string());
        }
        pooled_gamma_method(chains, DEFAULT_S).map_err(|e| e.to_string())
    };
    BinnedAutocorrelation {
        twopt: pooled(&two_chains),
        threept: pooled(&three_chains),
    }
}

/// What [`decide`] concluded: the factor to inflate by (if any) and a sentence for the run's
/// warnings (if anything is worth saying).
#[derive(Clone, Debug, PartialEq)]
pub struct Decision {
    /// `sqrt(2 τ_int)` when the deviations are to be inflated.
    pub factor: Option<f64>,
    /// What was measured and done, for the warnings.
    pub message: Option<String>,
}

/// Apply the setting `mode` to the measurement of data binned by `bin_size`.
pub fn decide(measured: &BinnedAutocorrelation, mode: Inflation, bin_size: usize) -> Decision {
    let Some((table, r)) = measured.largest() else {
        return Decision {
            factor: None,
            message: None,
        };
    };
    let significant = r.tau_int - r.tau_int_error > 0.5;
    let factor = (2.0 * r.tau_int).sqrt();
    let inflate = match mode {
        Inflation::Auto => significant,
        Inflation::Always => r.tau_int > 0.5,
        Inflation::Never => false,
    };
    let what = format!(
        "the bins of {bin_size} configuration(s) are still autocorrelated: tau_int = {:.2} +- \
         {:.2} (Gamma method on the {} bins, pooled over the {} time series of the {table} table)",
        r.tau_int, r.tau_int_error, r.n, r.chains
    );
    // A factor within a few per cent of 1 is what independent bins give half the time: it is
    // applied and written to autocorrelation.csv, but not worth a warning.
    let message = if inflate && (significant || factor > POSSIBLE) {
        Some(format!(
            "autocorrelation: {what}; every resampled deviation is inflated by sqrt(2 tau_int) = \
             {factor:.3} (resampling.autocorrelation_inflation: {}); larger bins would make \
             this unnecessary",
            mode.name()
        ))
    } else if significant && !inflate {
        Some(format!(
            "autocorrelation: {what}; errors are short by about sqrt(2 tau_int) = {factor:.3}; \
             set resampling.autocorrelation_inflation: auto, or use larger bins"
        ))
    } else if mode == Inflation::Auto && factor > POSSIBLE {
        Some(format!(
            "autocorrelation: {what}; not beyond 1/2 by its error, so nothing was inflated, \
             but if it is real the errors are short by sqrt(2 tau_int) = {factor:.3}; \
             resampling.autocorrelation_inflation: always inflates, larger bins avoid it"
        ))
    } else {
        None
    };
    Decision {
        factor: inflate.then_some(factor),
        message,
    }
}

/// Scale every bin's deviation from the mean of its time slice by `factor` (real and
/// imaginary parts), so every resampled deviation of anything computed from the series
/// grows by `factor` while the means stay.
pub fn inflate(series: &mut Series, factor: f64) {
    let n = series.n_cfg;
    if n == 0 {
        return;
    }
    for part in [&mut series.re, &mut series.im] {
        let mut slices: Vec<&mut [f64]> = part.chunks_mut(n).collect();
        for group in slices.chunks_mut(MEANS_AT_ONCE) {
            // The means of a whole group at once (the same bits as one by one).
            let means = stable_means_of(group);
            for (slice, m) in group.iter_mut().zip(means) {
                for v in slice.iter_mut() {
                    *v = m + factor * (*v - m);
                }
            }
        }
    }
}

/// [`inflate`] every channel of both tables (channels in parallel; each is scaled alone, so
/// the bits do not depend on the threads).
pub fn inflate_all(two: &mut TwoPointData, three: &mut ThreePointData, factor: f64) {
    let mut all: Vec<&mut Series> = two
        .channels
        .values_mut()
        .chain(three.channels.values_mut())
        .collect();
    all.par_iter_mut().for_each(|s| inflate(s, factor));
}

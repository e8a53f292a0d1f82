//! Autocorrelation in Monte Carlo time: the integrated autocorrelation time by the Gamma
//! method with automatic windowing (U. Wolff, Comput. Phys. Commun. 156 (2004) 143; equation
//! numbers are not quoted because they were not checked), and the
//! error of the mean versus bin size (a binning study).
//!
//! For a chain `x_1..x_N` with mean `x̄`:
//! - autocorrelation function `Γ(t) = 1/(N-t) Σ_{i=1}^{N-t} (x_i - x̄)(x_{i+t} - x̄)` and its
//!   normalised form `ρ(t) = Γ(t)/Γ(0)` (Wolff 2004);
//! - `τ_int(W) = 1/2 + Σ_{t=1}^{W} ρ(t)`;
//! - automatic window (Wolff 2004): with `τ(W) = S / ln((2τ_int(W)+1)/(2τ_int(W)-1))`
//!   (a tiny `τ` when `τ_int(W) <= 1/2`), `W` is the first window where
//!   `g(W) = exp(-W/τ(W)) - τ(W)/sqrt(W N)` becomes negative; `S` (default 1.5) measures how
//!   long the slowest mode is assumed to be relative to `τ_int`;
//! - bias correction (Wolff 2004): `Γ(t) += C_F/N` with `C_F = Γ(0) + 2 Σ_{t=1}^{W} Γ(t)`,
//!   after which `C_F`, `τ_int = C_F / (2Γ(0))` and the error of the mean `sqrt(C_F/N)` are
//!   recomputed;
//! - error of `τ_int` (Wolff 2004, after Madras & Sokal): `τ_int sqrt(4 (W + 1/2 - τ_int) / N)`.
//!
//! An AR(1) chain `x_i = ρ x_{i-1} + ε_i` has `ρ(t) = ρ^t` and `τ_int = (1+ρ)/(2(1-ρ))`.
//!
//! NIST's lag-1 "sample autocorrelation coefficient" divides `Σ_{i≥2}(y_i-ȳ)(y_{i-1}-ȳ)` by
//! `Σ(y_i-ȳ)²` (both sums unnormalised), so it equals `(N-1)/N ρ(1)` in the convention above;
//! [`sample_autocorrelation`] computes that convention.

use super::binning::bin_values;
use super::means::{stable_means, MEANS_AT_ONCE};
use super::value::stable_mean;
use crate::{Error, Result};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Wolff's recommended default for the windowing factor `S`.
pub const DEFAULT_S: f64 = 1.5;

/// Fewest values the Gamma method accepts.
pub const MIN_LENGTH: usize = 10;

/// Result of the Gamma method for the mean of one chain.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct AutocorrResult {
    /// Mean of the chain.
    pub mean: f64,
    /// Error of the mean including autocorrelation, `sqrt(C_F / N)`.
    pub error: f64,
    /// Integrated autocorrelation time (bias corrected); `1/2` for independent data.
    pub tau_int: f64,
    /// Statistical error of `tau_int`.
    pub tau_int_error: f64,
    /// The summation window `W` chosen.
    pub window: usize,
    /// Length of the chain.
    pub n: usize,
    /// Conditions that make the result less trustworthy (window not found, chain short
    /// compared with `tau_int`).
    pub warnings: Vec<String>,
}

/// Result of [`pooled_gamma_method`]: the integrated autocorrelation time many chains share.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct PooledAutocorr {
    /// Integrated autocorrelation time (bias corrected); `1/2` for independent data.
    pub tau_int: f64,
    /// Statistical error of `tau_int` (the one-chain formula; see [`pooled_gamma_method`]).
    pub tau_int_error: f64,
    /// The summation window `W` chosen.
    pub window: usize,
    /// Length of each chain.
    pub n: usize,
    /// Number of chains pooled (constant ones are skipped).
    pub chains: usize,
    /// As for one chain: window not found, chains short compared with `tau_int`.
    pub warnings: Vec<String>,
}

/// One point of a binning study.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct BinningPoint {
    /// Configurations per bin.
    pub bin_size: usize,
    /// Naive error of the mean of the bins, `s_bins / sqrt(n_bins)`.
    pub error: f64,
}

fn check_chain(x: &[f64]) -> Result<f64> {
    if x.len() < MIN_LENGTH {
        return Err(Error::analysis(
            "autocorrelation",
            format!(
                "a chain of {} values is too short; at least {MIN_LENGTH} are needed",
                x.len()
            ),
        ));
    }
    if let Some(i) = x.iter().position(|v| !v.is_finite()) {
        return Err(Error::analysis(
            "autocorrelation",
            format!("value {i} of the chain is not finite ({})", x[i]),
        ));
    }
    Ok(stable_mean(x))
}

/// Deviations from the mean, and `Γ(t)` from them with the `1/(N-t)` normalisation.
fn deviations(x: &[f64], mean: f64) -> Vec<f64> {
    x.iter().map(|v| v - mean).collect()
}

/// `Γ(t)` of stored deviations (`a - 0.0` is `a` exactly, so this is [`gamma_about`] bit for
/// bit).
fn gamma_at(dev: &[f64], t: usize) -> f64 {
    gamma_about(dev, 0.0, t)
}

/// `Γ(t)` of the deviations of `x` from `mean`, each deviation formed where it is used
/// instead of stored: pooling every time series of a table would otherwise copy the whole
/// table.
fn gamma_about(x: &[f64], mean: f64, t: usize) -> f64 {
    let n = x.len();
    let s: f64 = x[..n - t]
        .iter()
        .zip(&x[t..])
        .map(|(a, b)| (a - mean) * (b - mean))
        .sum();
    s / (n - t) as f64
}

/// Normalised autocorrelation function `ρ(t) = Γ(t)/Γ(0)`, `t = 0..=max_lag` (capped at
/// `N-1`), with Wolff's `1/(N-t)` normalisation of `Γ`. Errors for a chain shorter than
/// [`MIN_LENGTH`], with non-finite values, or constant.
pub fn rho(x: &[f64], max_lag: usize) -> Result<Vec<f64>> {
    let dev = deviations(x, check_chain(x)?);
    let g0 = gamma_at(&dev, 0);
    if g0 <= 0.0 {
        return Err(constant_chain());
    }
    Ok((0..=max_lag.min(x.len() - 1))
        .map(|t| gamma_at(&dev, t) / g0)
        .collect())
}

/// The sample autocorrelation coefficient at `lag` in the NIST / Box–Jenkins convention,
/// `Σ_{i>lag}(y_i-ȳ)(y_{i-lag}-ȳ) / Σ_i(y_i-ȳ)²`. Errors for non-finite values, a constant
/// chain, or `lag >= N`.
pub fn sample_autocorrelation(x: &[f64], lag: usize) -> Result<f64> {
    if let Some(i) = x.iter().position(|v| !v.is_finite()) {
        return Err(Error::analysis(
            "autocorrelation",
            format!("value {i} of the chain is not finite ({})", x[i]),
        ));
    }
    if lag >= x.len() {
        return Err(Error::analysis(
            "autocorrelation",
            format!(
                "lag {lag} is not shorter than the chain ({} values)",
                x.len()
            ),
        ));
    }
    let dev = deviations(x, stable_mean(x));
    let den: f64 = dev.iter().map(|d| d * d).sum();
    if den <= 0.0 {
        return Err(constant_chain());
    }
    let num: f64 = dev[lag..].iter().zip(&dev).map(|(a, b)| a * b).sum();
    Ok(num / den)
}

fn constant_chain() -> Error {
    Error::analysis(
        "autocorrelation",
        "the chain is constant; its autocorrelation is undefined (and its error zero)",
    )
}

/// Wolff's Gamma method for the mean of the chain `x` with windowing factor `s`
/// ([`DEFAULT_S`] = 1.5). Errors for a chain shorter than [`MIN_LENGTH`], with non-finite
/// values, constant, for `s <= 0`, or when the summed autocorrelation is not positive (a
/// strongly anticorrelated chain). When no window is found up to `N/2` the largest is used and
/// a warning says so.
pub fn gamma_method(x: &[f64], s: f64) -> Result<AutocorrResult> {
    if !(s > 0.0 && s.is_finite()) {
        return Err(Error::analysis(
            "autocorrelation",
            format!("windowing factor S = {s}; expected a positive number (default 1.5)"),
        ));
    }
    let mean = check_chain(x)?;
    let dev = deviations(x, mean);
    if gamma_at(&dev, 0) <= 0.0 {
        return Err(constant_chain());
    }
    // Γ(t) is computed lag by lag, only up to the window (O(N W), not O(N²)).
    let w = windowed(x.len(), s, |t| gamma_at(&dev, t))?;
    Ok(AutocorrResult {
        mean,
        error: (w.c_f / x.len() as f64).sqrt(),
        tau_int: w.tau_int,
        tau_int_error: w.tau_int_error,
        window: w.window,
        n: x.len(),
        warnings: w.warnings,
    })
}

/// What the automatic window gives for one autocorrelation function.
pub(crate) struct Windowed {
    /// Bias-corrected `τ_int`.
    pub tau_int: f64,
    /// Its statistical error (Madras–Sokal).
    pub tau_int_error: f64,
    /// The summation window `W`.
    pub window: usize,
    /// `C_F = Γ(0) + 2 Σ_{t=1}^{W} Γ(t)` after the bias correction.
    pub c_f: f64,
    /// Window not found; chain short compared with `τ_int`.
    pub warnings: Vec<String>,
}

/// Wolff's automatic window, bias correction and error of `τ_int` for an autocorrelation
/// function `gamma(t)` of a chain of `n` values (`gamma(0) > 0`, asked lag by lag up to the
/// window, at most `n/2`), with windowing factor `s`. See the module docs.
pub(crate) fn windowed(n: usize, s: f64, mut gamma: impl FnMut(usize) -> f64) -> Result<Windowed> {
    let nf = n as f64;
    let w_max = n / 2;
    let mut g = vec![gamma(0)];
    let mut warnings = Vec::new();
    let mut window = None;
    let mut tau_int = 0.5;
    for w in 1..=w_max {
        let gw = gamma(w);
        g.push(gw);
        tau_int += gw / g[0];
        let tau = if tau_int > 0.5 {
            s / ((2.0 * tau_int + 1.0) / (2.0 * tau_int - 1.0)).ln()
        } else {
            1e-6
        };
        let gw_crit = (-(w as f64) / tau).exp() - tau / (w as f64 * nf).sqrt();
        if gw_crit < 0.0 {
            window = Some(w);
            break;
        }
    }
    let window = match window {
        Some(w) => w,
        None => {
            warnings.push(format!(
                "no summation window found up to N/2 = {w_max}: the chain is too short for its \
                 autocorrelation time; tau_int is a lower bound"
            ));
            w_max
        }
    };

    let c_f = |g: &[f64]| g[0] + 2.0 * g[1..=window].iter().sum::<f64>();
    let bias = c_f(&g) / nf;
    for v in g.iter_mut().take(window + 1) {
        *v += bias;
    }
    let cf = c_f(&g);
    if cf.is_nan() || cf <= 0.0 {
        return Err(Error::analysis(
            "autocorrelation",
            format!(
                "the summed autocorrelation C_F = {cf:.3e} is not positive (a strongly \
                 anticorrelated chain); the Gamma method gives no error"
            ),
        ));
    }
    let tau_int = cf / (2.0 * g[0]);
    let tau_int_error = tau_int * (4.0 * (window as f64 + 0.5 - tau_int).max(0.0) / nf).sqrt();
    if nf < 100.0 * tau_int {
        warnings.push(format!(
            "the chain has {n} values, fewer than 100 tau_int = {:.0}; the error estimate is \
             unreliable",
            100.0 * tau_int
        ));
    }
    Ok(Windowed {
        tau_int,
        tau_int_error,
        window,
        c_f: cf,
        warnings,
    })
}

/// `τ_int` shared by many chains of the same length (e.g. every time slice of every channel
/// of one ensemble), from their normalised autocorrelation functions averaged with equal
/// weight, `ρ̄(t) = mean_c Γ_c(t)/Γ_c(0)`, then Wolff's automatic window, bias correction and
/// error as for one chain ([`gamma_method`]). Averaging over chains lowers the noise of `ρ̄`;
/// the error quoted is the one-chain formula for `N` values, which is an upper bound when the
/// chains are correlated with one another (as the channels of one ensemble are) and
/// conservative otherwise. Constant chains are skipped; errors when every chain is constant,
/// when the lengths differ, a chain is shorter than [`MIN_LENGTH`] or holds a non-finite
/// value, or `s` is not positive.
pub fn pooled_gamma_method(chains: &[&[f64]], s: f64) -> Result<PooledAutocorr> {
    if !(s > 0.0 && s.is_finite()) {
        return Err(Error::analysis(
            "autocorrelation",
            format!("windowing factor S = {s}; expected a positive number (default 1.5)"),
        ));
    }
    let n = chains.first().map_or(0, |c| c.len());
    // Each chain's mean and its first LAGS normalised Γ_c(t)/Γ_c(0) in one pass, on the worker
    // threads; the first failing chain (in order) decides the error, as a loop would.
    let first: Vec<Result<Option<Kept>>> = chains
        .par_chunks(MEANS_AT_ONCE)
        .with_min_len(16)
        .map_init(Vec::new, |dev, group| {
            let means: Vec<Result<f64>> = match group {
                // Plain chains (full length, finite) have their means taken together.
                [a, b, c, d]
                    if n >= MIN_LENGTH && group.iter().all(|c| c.len() == n && all_finite(c)) =>
                {
                    stable_means([a, b, c, d]).into_iter().map(Ok).collect()
                }
                _ => group
                    .iter()
                    .map(|c| {
                        if c.len() != n {
                            return Err(Error::analysis(
                                "autocorrelation",
                                format!("chains of {} and {n} values cannot be pooled", c.len()),
                            ));
                        }
                        check_chain(c)
                    })
                    .collect(),
            };
            group
                .iter()
                .zip(means)
                .map(|(c, mean)| {
                    let mean = mean?;
                    let lags = gammas_about(c, mean, 0, dev);
                    Ok((lags[0] > 0.0).then(|| {
                        let g0 = lags[0];
                        (*c, mean, g0, lags.map(|g| g / g0))
                    }))
                })
                .collect::<Vec<_>>()
        })
        .flatten_iter()
        .collect();
    let first = first.into_iter().collect::<Result<Vec<_>>>()?;
    let kept: Vec<_> = first.into_iter().flatten().collect();
    if kept.is_empty() {
        return Err(constant_chain());
    }
    let k = kept.len() as f64;
    // ρ̄(t) summed over the chains in their order, so the bits do not depend on the threads.
    let pooled = |rho: &dyn Fn(usize) -> f64| (0..kept.len()).map(rho).sum::<f64>() / k;
    // Lags beyond the first LAGS, computed LAGS at a time when the window asks for them.
    let mut later: Vec<[f64; LAGS]> = Vec::new();
    let mut later_from = LAGS;
    let w = windowed(n, s, |t| {
        if t < LAGS {
            return pooled(&|c| kept[c].3[t]);
        }
        if t < later_from || t >= later_from + LAGS || later.is_empty() {
            later_from = t;
            later = kept
                .par_iter()
                .with_min_len(64)
                .map_init(Vec::new, |dev, (c, mean, g0, _)| {
                    gammas_about(c, *mean, t, dev).map(|g| g / g0)
                })
                .collect();
        }
        pooled(&|c| later[c][t - later_from])
    })?;
    Ok(PooledAutocorr {
        tau_int: w.tau_int,
        tau_int_error: w.tau_int_error,
        window: w.window,
        n,
        chains: kept.len(),
        warnings: w.warnings,
    })
}

/// A chain kept by [`pooled_gamma_method`]: its values, mean, `Γ(0)` and first
/// normalised `Γ(t)/Γ(0)`.
type Kept<'a> = (&'a [f64], f64, f64, [f64; LAGS]);

/// Whether every value is finite (no early exit, so the loop vectorises).
fn all_finite(x: &[f64]) -> bool {
    x.iter().fold(true, |ok, v| ok & v.is_finite())
}

/// Lags computed together by [`gammas_about`]: a typical window is a few lags, and each
/// chain is then read once.
const LAGS: usize = 8;

/// `Γ(t)` of `x` about `mean` for `t = from..from + LAGS` (zero where `t >= N`), bit for bit
/// [`gamma_about`] at each lag: the same products, summed in the same order (`-0.0 + p` is
/// `p`, as `Iterator::sum` starts), but one pass over the chain for all the lags. `dev` is
/// scratch memory for the deviations.
fn gammas_about(x: &[f64], mean: f64, from: usize, dev: &mut Vec<f64>) -> [f64; LAGS] {
    let n = x.len();
    dev.clear();
    dev.extend(x.iter().map(|v| v - mean));
    let mut sums = [-0.0f64; LAGS];
    // Rows `i` where every lag has a partner `i + t < n`: no test per product.
    let full = n.saturating_sub(from + LAGS - 1);
    for i in 0..full {
        let di = dev[i];
        let partners = &dev[i + from..i + from + LAGS];
        for (s, d) in sums.iter_mut().zip(partners) {
            *s += di * d;
        }
    }
    for i in full..n {
        let di = dev[i];
        for (j, s) in sums.iter_mut().enumerate() {
            if let Some(d) = dev.get(i + from + j) {
                *s += di * d;
            }
        }
    }
    let mut out = [0.0; LAGS];
    for (j, (o, s)) in out.iter_mut().zip(sums).enumerate() {
        let t = from + j;
        if t < n {
            *o = s / (n - t) as f64;
        }
    }
    out
}

/// Error of the mean versus bin size, `b = 1..=max_bin`, stopping before fewer than two bins
/// remain: the naive error of the bin means, `s_bins / sqrt(n_bins)` (`s` with denominator
/// `n_bins - 1`). For a chain with autocorrelation it rises with `b` and levels off at the
/// true error, about `sqrt(2 tau_int)` times the `b = 1` value.
pub fn binning_study(x: &[f64], max_bin: usize) -> Vec<BinningPoint> {
    (1..=max_bin)
        .map_while(|b| {
            let bins = bin_values(x, b);
            let m = bins.len();
            if m < 2 {
                return None;
            }
            let mean = stable_mean(&bins);
            let var = bins.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (m as f64 - 1.0);
            Some(BinningPoint {
                bin_size: b,
                error: (var / m as f64).sqrt(),
            })
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::{deviations, gamma_about, gamma_at, gammas_about};

    #[test]
    fn gamma_about_the_mean_equals_gamma_of_stored_deviations_bit_for_bit() {
        // The pooled Gamma method forms deviations where it uses them; it must give the same
        // bits as Gamma(t) of stored deviations (the definition in Wolff 2004).
        let x: Vec<f64> = (0..97)
            .map(|i| ((i * 37 % 101) as f64 * 0.013).sin() + 1e-3 * i as f64)
            .collect();
        let mean = x.iter().sum::<f64>() / x.len() as f64;
        let dev = deviations(&x, mean);
        for t in 0..x.len() {
            assert_eq!(
                gamma_about(&x, mean, t).to_bits(),
                gamma_at(&dev, t).to_bits(),
                "t = {t}"
            );
        }
    }

    #[test]
    fn lags_in_one_pass_equal_gamma_about_bit_for_bit() {
        // The pooled Gamma method takes LAGS lags per pass; each must be the one-lag sum
        // (its products summed in the same order), including lags at and beyond the end.
        for n in [1, 7, 8, 9, 23, 97] {
            let x: Vec<f64> = (0..n)
                .map(|i| ((i * 53 % 89) as f64 * 0.021).cos() * 1e3 - 0.5 * i as f64)
                .collect();
            let mean = x.iter().sum::<f64>() / n as f64;
            let mut dev = Vec::new();
            for from in [0, 1, 5, 16, 90] {
                let lags = gammas_about(&x, mean, from, &mut dev);
                for (j, g) in lags.iter().enumerate() {
                    let t = from + j;
                    let want = if t < n { gamma_about(&x, mean, t) } else { 0.0 };
                    assert_eq!(g.to_bits(), want.to_bits(), "n = {n}, t = {t}");
                }
            }
        }
    }

    #[test]
    fn means_taken_together_equal_stable_mean_bit_for_bit() {
        // Interleaving the sums of several chains must not change any chain's bits, with a
        // large common offset (where the second pass matters) and with unequal lengths.
        use crate::resample::means::stable_means;
        use crate::resample::value::stable_mean;
        let chain = |k: usize, n: usize| -> Vec<f64> {
            (0..n)
                .map(|i| 1e6 + ((i * (17 + k) % 101) as f64 * 0.37).sin() * (k + 1) as f64)
                .collect()
        };
        for n in [1, 2, 10, 333] {
            for longer_last in [0, 1] {
                let xs: Vec<Vec<f64>> = (0..4)
                    .map(|k| chain(k, n + usize::from(k == 3) * longer_last))
                    .collect();
                let got = stable_means([&xs[0], &xs[1], &xs[2], &xs[3]]);
                for (x, g) in xs.iter().zip(got) {
                    assert_eq!(g.to_bits(), stable_mean(x).to_bits(), "n = {n}");
                }
            }
        }
    }
}

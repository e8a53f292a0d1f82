//! The resampled value: a full-ensemble estimate plus one value per jackknife or bootstrap
//! sample, with the error formulas of each scheme (Efron & Tibshirani, *An Introduction to
//! the Bootstrap*, 1993, the bootstrap and jackknife chapters).
//!
//! With `N` samples `x_k`, sample mean `x̄ = (1/N) Σ x_k` and central value `c`:
//! - jackknife (delete-one on bins): `σ² = (N-1)/N Σ (x_k - x̄)²`, covariance alike,
//!   bias-corrected estimate `N c - (N-1) x̄`;
//! - bootstrap: `σ² = 1/(N-1) Σ (x_k - x̄)²`, bias-corrected estimate `2 c - x̄`, and the
//!   percentile interval from the sorted samples.

use super::notation::fmt_value_error;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::fmt;
use std::ops::{Add, Div, Mul, Neg, Sub};

/// Which resampling scheme produced the samples; it fixes the error formula.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Scheme {
    /// Delete-one jackknife: `sigma^2 = (N-1)/N sum (x_j - xbar)^2`.
    Jackknife,
    /// Bootstrap: `sigma^2 = 1/(B-1) sum (x_b - xbar)^2`.
    Bootstrap,
}

impl fmt::Display for Scheme {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Scheme::Jackknife => "jackknife",
            Scheme::Bootstrap => "bootstrap",
        })
    }
}

/// A quantity with its resamples: the full-ensemble estimate and one value per resample.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Resampled {
    /// Estimate on the full ensemble.
    pub central: f64,
    /// One value per jackknife or bootstrap sample.
    pub samples: Vec<f64>,
    /// The scheme, which fixes the error formula.
    pub scheme: Scheme,
}

/// The numbers a table or report prints for one resampled value.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Summary {
    /// Full-ensemble estimate.
    pub central: f64,
    /// Statistical error (scheme-appropriate standard deviation).
    pub error: f64,
    /// Bias-corrected estimate (see [`Resampled::bias_corrected`]).
    pub bias_corrected: f64,
    /// Mean of the samples.
    pub sample_mean: f64,
    /// Number of samples.
    pub n_samples: usize,
    /// The scheme.
    pub scheme: Scheme,
}

impl Resampled {
    /// A value from its parts.
    pub fn new(central: f64, samples: Vec<f64>, scheme: Scheme) -> Self {
        Resampled {
            central,
            samples,
            scheme,
        }
    }

    /// An exact number (no fluctuation) with `n` samples under `scheme`.
    pub fn constant(value: f64, n: usize, scheme: Scheme) -> Self {
        Resampled::new(value, vec![value; n], scheme)
    }

    /// Number of samples.
    pub fn len(&self) -> usize {
        self.samples.len()
    }

    /// True when there are no samples.
    pub fn is_empty(&self) -> bool {
        self.samples.is_empty()
    }

    /// Mean of the samples (NaN when there are none).
    pub fn sample_mean(&self) -> f64 {
        if self.samples.is_empty() {
            return f64::NAN;
        }
        stable_mean(&self.samples)
    }

    /// Statistical error (standard deviation appropriate to the scheme).
    pub fn error(&self) -> f64 {
        self.variance().sqrt()
    }

    /// Variance appropriate to the scheme (NaN with fewer than two samples): the
    /// [`covariance_of`] the samples with themselves, their mean computed once.
    pub fn variance(&self) -> f64 {
        self.variance_with_mean(self.sample_mean())
    }

    /// [`Self::variance`] about the samples' `mean`, already computed.
    fn variance_with_mean(&self, mean: f64) -> f64 {
        if self.samples.len() < 2 {
            return f64::NAN;
        }
        variance_about(&self.samples, mean, self.scheme)
    }

    /// Covariance with another value of the same scheme and length (NaN when the lengths
    /// differ or there are fewer than two samples).
    pub fn covariance(&self, other: &Resampled) -> f64 {
        covariance_of(&self.samples, &other.samples, self.scheme)
    }

    /// Correlation coefficient with another value of the same scheme and length.
    pub fn correlation(&self, other: &Resampled) -> f64 {
        self.covariance(other) / (self.variance() * other.variance()).sqrt()
    }

    /// Bias-corrected estimate: `N c - (N-1) mean` (jackknife), `2 c - mean` (bootstrap).
    pub fn bias_corrected(&self) -> f64 {
        bias_corrected_with(
            self.central,
            self.sample_mean(),
            self.samples.len(),
            self.scheme,
        )
    }

    /// Estimated bias of the central value: `central - bias_corrected()`, i.e.
    /// `(N-1)(mean - c)` (jackknife) or `mean - c` (bootstrap).
    pub fn bias(&self) -> f64 {
        self.central - self.bias_corrected()
    }

    /// Central value, error, bias-corrected value and sample count in one record: the same
    /// numbers as [`Self::error`], [`Self::bias_corrected`] and [`Self::sample_mean`], the
    /// samples' mean computed once for all three.
    pub fn summary(&self) -> Summary {
        let n = self.samples.len();
        let mean = self.sample_mean();
        Summary {
            central: self.central,
            error: self.variance_with_mean(mean).sqrt(),
            bias_corrected: bias_corrected_with(self.central, mean, n, self.scheme),
            sample_mean: mean,
            n_samples: n,
            scheme: self.scheme,
        }
    }

    /// Bootstrap percentile interval holding the central fraction `level` of the samples
    /// (e.g. 0.6827 for a one-sigma interval), by linear interpolation between order
    /// statistics. Errors for a jackknife value (its samples are not a sampling
    /// distribution), for `level` outside (0, 1), or for non-finite samples.
    pub fn percentile_interval(&self, level: f64) -> Result<(f64, f64)> {
        if self.scheme != Scheme::Bootstrap {
            return Err(Error::analysis(
                "resample",
                "a percentile interval needs bootstrap samples; jackknife samples are not a \
                 sampling distribution (use the error instead)",
            ));
        }
        if !(level > 0.0 && level < 1.0) {
            return Err(Error::analysis(
                "resample",
                format!("percentile interval level {level} must lie strictly between 0 and 1"),
            ));
        }
        if self.samples.len() < 2 || !self.samples.iter().all(|x| x.is_finite()) {
            return Err(Error::analysis(
                "resample",
                "a percentile interval needs at least two finite bootstrap samples",
            ));
        }
        let mut s = self.samples.clone();
        s.sort_by(f64::total_cmp);
        let q = |p: f64| {
            let pos = p * (s.len() - 1) as f64;
            let lo = pos.floor() as usize;
            let hi = (lo + 1).min(s.len() - 1);
            s[lo] + (pos - lo as f64) * (s[hi] - s[lo])
        };
        let tail = (1.0 - level) / 2.0;
        Ok((q(tail), q(1.0 - tail)))
    }

    /// Apply `f` to the central value and to every sample.
    pub fn map(&self, f: impl Fn(f64) -> f64) -> Resampled {
        Resampled::new(
            f(self.central),
            self.samples.iter().map(|&x| f(x)).collect(),
            self.scheme,
        )
    }

    /// Combine two values sample by sample.
    ///
    /// Both must come from the same plan (a debug assertion). In release builds a
    /// sample-count mismatch gives NaN samples, never silently truncated numbers; where the
    /// two values come from different inputs (a stage boundary) use
    /// [`Resampled::try_zip_map`], which returns an error instead.
    pub fn zip_map(&self, other: &Resampled, f: impl Fn(f64, f64) -> f64) -> Resampled {
        debug_assert_eq!(self.samples.len(), other.samples.len());
        if self.samples.len() != other.samples.len() {
            return self.mismatched();
        }
        Resampled::new(
            f(self.central, other.central),
            self.samples
                .iter()
                .zip(&other.samples)
                .map(|(&a, &b)| f(a, b))
                .collect(),
            self.scheme,
        )
    }

    /// [`Resampled::zip_map`] after checking that both values share a scheme and sample
    /// count; `what` names them in the error message.
    pub fn try_zip_map(
        &self,
        other: &Resampled,
        what: &str,
        f: impl Fn(f64, f64) -> f64,
    ) -> Result<Resampled> {
        check_same_plan([self, other], what)?;
        Ok(self.zip_map(other, f))
    }

    /// Combine any number of values sample by sample: `f` receives the i-th value of each.
    ///
    /// All inputs must share a scheme and length (a debug assertion; in release builds a
    /// mismatch gives NaN samples). For a list built from data, where it may be empty or mix
    /// plans, use [`Resampled::try_combine`].
    ///
    /// # Panics
    /// If `values` is empty (callers pass a fixed, non-empty list).
    pub fn combine(values: &[&Resampled], f: impl Fn(&[f64]) -> f64) -> Resampled {
        let first = values[0];
        let n = first.samples.len();
        debug_assert!(values.iter().all(|v| v.samples.len() == n));
        if values.iter().any(|v| v.samples.len() != n) {
            return first.mismatched();
        }
        let mut buf = vec![0.0; values.len()];
        for (b, v) in buf.iter_mut().zip(values) {
            *b = v.central;
        }
        let central = f(&buf);
        let samples = (0..n)
            .map(|s| {
                for (b, v) in buf.iter_mut().zip(values) {
                    *b = v.samples[s];
                }
                f(&buf)
            })
            .collect();
        Resampled::new(central, samples, first.scheme)
    }

    /// [`Resampled::combine`] for a fixed number of values, `f` taking them as an array: the
    /// same values bit for bit (the same operations per sample), without a gather buffer or
    /// bounds checks in the loop.
    pub fn combine_array<const N: usize>(
        values: [&Resampled; N],
        f: impl Fn([f64; N]) -> f64,
    ) -> Resampled {
        let first = values[0];
        let n = first.samples.len();
        debug_assert!(values.iter().all(|v| v.samples.len() == n));
        if values.iter().any(|v| v.samples.len() != n) {
            return first.mismatched();
        }
        let central = f(values.map(|v| v.central));
        let columns = values.map(|v| &v.samples[..n]);
        let samples = (0..n).map(|s| f(columns.map(|c| c[s]))).collect();
        Resampled::new(central, samples, first.scheme)
    }

    /// [`Resampled::combine`] after checking that `values` is non-empty and shares one scheme
    /// and sample count; `what` names the values in the error message.
    pub fn try_combine(
        values: &[&Resampled],
        what: &str,
        f: impl Fn(&[f64]) -> f64,
    ) -> Result<Resampled> {
        check_same_plan(values.iter().copied(), what)?;
        Ok(Resampled::combine(values, f))
    }

    /// Check that `values` is non-empty and shares one scheme and sample count; `what` names
    /// the values in the error message.
    pub fn check_compatible(values: &[Resampled], what: &str) -> Result<()> {
        check_same_plan(values, what)
    }

    /// The all-NaN result of combining values from different plans.
    fn mismatched(&self) -> Resampled {
        Resampled::new(f64::NAN, vec![f64::NAN; self.samples.len()], self.scheme)
    }

    /// The plain average of several values, sample by sample (e.g. over equivalent momenta).
    /// Errors when `values` is empty or the values do not share a scheme and sample count.
    pub fn mean_of(values: &[Resampled]) -> Result<Resampled> {
        Resampled::check_compatible(values, "average of resampled values")?;
        let refs: Vec<&Resampled> = values.iter().collect();
        let n = values.len() as f64;
        Ok(Resampled::combine(&refs, |x| x.iter().sum::<f64>() / n))
    }

    /// True when the central value and every sample are finite.
    pub fn is_finite(&self) -> bool {
        self.central.is_finite() && self.samples.iter().all(|x| x.is_finite())
    }

    /// Square root, sample by sample.
    pub fn sqrt(&self) -> Resampled {
        self.map(f64::sqrt)
    }
    /// Natural logarithm, sample by sample.
    pub fn ln(&self) -> Resampled {
        self.map(f64::ln)
    }
    /// Exponential, sample by sample.
    pub fn exp(&self) -> Resampled {
        self.map(f64::exp)
    }
    /// Integer power, sample by sample.
    pub fn powi(&self, n: i32) -> Resampled {
        self.map(|x| x.powi(n))
    }
    /// Real power, sample by sample.
    pub fn powf(&self, e: f64) -> Resampled {
        self.map(|x| x.powf(e))
    }
    /// Absolute value, sample by sample.
    pub fn abs(&self) -> Resampled {
        self.map(f64::abs)
    }
}

/// `central(error)`, e.g. `0.9234(56)`; see [`fmt_value_error`].
impl fmt::Display for Resampled {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&fmt_value_error(self.central, self.error()))
    }
}

/// Mean computed in two passes (mean, then the mean of the residuals added back), which
/// keeps full precision for data with a large common offset.
pub(crate) fn stable_mean(x: &[f64]) -> f64 {
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    m + x.iter().map(|v| v - m).sum::<f64>() / n
}

/// Covariance of two sample vectors under `scheme` (NaN when the lengths differ or there
/// are fewer than two samples).
pub fn covariance_of(a: &[f64], b: &[f64], scheme: Scheme) -> f64 {
    let n = a.len();
    if n < 2 || b.len() != n {
        return f64::NAN;
    }
    let ma = stable_mean(a);
    let mb = stable_mean(b);
    let s: f64 = a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum();
    product_sum_norm(s, n, scheme)
}

/// [`covariance_of`] `a` with itself given its [`stable_mean`] `mean` (the same operations,
/// so the same bits); `a` has at least two samples.
fn variance_about(a: &[f64], mean: f64, scheme: Scheme) -> f64 {
    let s: f64 = a.iter().map(|x| (x - mean) * (x - mean)).sum();
    product_sum_norm(s, a.len(), scheme)
}

/// A sum of `n` products of deviations from the mean turned into a (co)variance: the
/// jackknife's `(n-1)/n` or the bootstrap's `1/(n-1)`.
fn product_sum_norm(s: f64, n: usize, scheme: Scheme) -> f64 {
    match scheme {
        Scheme::Jackknife => s * (n as f64 - 1.0) / n as f64,
        Scheme::Bootstrap => s / (n as f64 - 1.0),
    }
}

/// The bias-corrected estimate from the central value and the samples' mean (see
/// [`Resampled::bias_corrected`]).
fn bias_corrected_with(central: f64, mean: f64, n: usize, scheme: Scheme) -> f64 {
    let n = n as f64;
    match scheme {
        Scheme::Jackknife => n * central - (n - 1.0) * mean,
        Scheme::Bootstrap => 2.0 * central - mean,
    }
}

macro_rules! binop {
    ($tr:ident, $m:ident, $op:tt) => {
        impl $tr<&Resampled> for &Resampled {
            type Output = Resampled;
            fn $m(self, rhs: &Resampled) -> Resampled {
                self.zip_map(rhs, |a, b| a $op b)
            }
        }
        impl $tr<Resampled> for Resampled {
            type Output = Resampled;
            fn $m(self, rhs: Resampled) -> Resampled {
                (&self).$m(&rhs)
            }
        }
        impl $tr<&Resampled> for Resampled {
            type Output = Resampled;
            fn $m(self, rhs: &Resampled) -> Resampled {
                (&self).$m(rhs)
            }
        }
        impl $tr<f64> for &Resampled {
            type Output = Resampled;
            fn $m(self, rhs: f64) -> Resampled {
                self.map(|a| a $op rhs)
            }
        }
        impl $tr<f64> for Resampled {
            type Output = Resampled;
            fn $m(self, rhs: f64) -> Resampled {
                (&self).$m(rhs)
            }
        }
        impl $tr<&Resampled> for f64 {
            type Output = Resampled;
            fn $m(self, rhs: &Resampled) -> Resampled {
                rhs.map(|b| self $op b)
            }
        }
        impl $tr<Resampled> for f64 {
            type Output = Resampled;
            fn $m(self, rhs: Resampled) -> Resampled {
                rhs.map(|b| self $op b)
            }
        }
    };
}
binop!(Add, add, +);
binop!(Sub, sub, -);
binop!(Mul, mul, *);
binop!(Div, div, /);

impl Neg for &Resampled {
    type Output = Resampled;
    fn neg(self) -> Resampled {
        self.map(|x| -x)
    }
}
impl Neg for Resampled {
    type Output = Resampled;
    fn neg(self) -> Resampled {
        self.map(|x| -x)
    }
}

/// Error unless `values` is non-empty and shares one scheme and sample count.
fn check_same_plan<'a>(values: impl IntoIterator<Item = &'a Resampled>, what: &str) -> Result<()> {
    let mut values = values.into_iter();
    let Some(first) = values.next() else {
        return Err(Error::analysis(
            "resample",
            format!("{what}: no values given"),
        ));
    };
    for (i, v) in values.enumerate() {
        if v.scheme != first.scheme || v.samples.len() != first.samples.len() {
            return Err(Error::analysis(
                "resample",
                format!(
                    "{what}: value {} has {} {} samples but value 0 has {} {} samples; all \
                     must come from the same resample plan",
                    i + 1,
                    v.samples.len(),
                    v.scheme,
                    first.samples.len(),
                    first.scheme
                ),
            ));
        }
    }
    Ok(())
}

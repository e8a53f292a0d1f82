//! Resampling: the [`Resampled`] value that carries errors through every stage, and the
//! jackknife / bootstrap plans that make it from per-configuration data (methods.md §7).
//!
//! A [`Resampled`] holds the estimate on the full ensemble (`central`) and one value per
//! resample. Any function of resampled values is evaluated on the central value and on every
//! sample alike, so errors propagate through non-linear steps without linearisation.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};
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

    /// Mean of the samples.
    pub fn sample_mean(&self) -> f64 {
        if self.samples.is_empty() {
            return f64::NAN;
        }
        self.samples.iter().sum::<f64>() / self.samples.len() as f64
    }

    /// Statistical error (standard deviation appropriate to the scheme).
    pub fn error(&self) -> f64 {
        self.variance().sqrt()
    }

    /// Variance appropriate to the scheme.
    pub fn variance(&self) -> f64 {
        let n = self.samples.len();
        if n < 2 {
            return f64::NAN;
        }
        let m = self.sample_mean();
        let ss: f64 = self.samples.iter().map(|x| (x - m) * (x - m)).sum();
        match self.scheme {
            Scheme::Jackknife => ss * (n as f64 - 1.0) / n as f64,
            Scheme::Bootstrap => ss / (n as f64 - 1.0),
        }
    }

    /// Covariance with another value of the same scheme and length.
    pub fn covariance(&self, other: &Resampled) -> f64 {
        covariance_of(&self.samples, &other.samples, self.scheme)
    }

    /// Bias-corrected estimate: `N c - (N-1) mean` (jackknife), `2 c - mean` (bootstrap).
    pub fn bias_corrected(&self) -> f64 {
        let n = self.samples.len() as f64;
        match self.scheme {
            Scheme::Jackknife => n * self.central - (n - 1.0) * self.sample_mean(),
            Scheme::Bootstrap => 2.0 * self.central - self.sample_mean(),
        }
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
    pub fn zip_map(&self, other: &Resampled, f: impl Fn(f64, f64) -> f64) -> Resampled {
        debug_assert_eq!(self.samples.len(), other.samples.len());
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

    /// Combine any number of values sample by sample: `f` receives the i-th value of each.
    /// All inputs must share a scheme and length; `values` must not be empty.
    pub fn combine(values: &[&Resampled], f: impl Fn(&[f64]) -> f64) -> Resampled {
        let first = values[0];
        let mut buf = vec![0.0; values.len()];
        for (b, v) in buf.iter_mut().zip(values) {
            *b = v.central;
        }
        let central = f(&buf);
        let samples = (0..first.samples.len())
            .map(|s| {
                for (b, v) in buf.iter_mut().zip(values) {
                    *b = v.samples[s];
                }
                f(&buf)
            })
            .collect();
        Resampled::new(central, samples, first.scheme)
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

/// Covariance of two sample vectors under `scheme`.
pub fn covariance_of(a: &[f64], b: &[f64], scheme: Scheme) -> f64 {
    let n = a.len();
    if n < 2 || b.len() != n {
        return f64::NAN;
    }
    let ma = a.iter().sum::<f64>() / n as f64;
    let mb = b.iter().sum::<f64>() / n as f64;
    let s: f64 = a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum();
    match scheme {
        Scheme::Jackknife => s * (n as f64 - 1.0) / n as f64,
        Scheme::Bootstrap => s / (n as f64 - 1.0),
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

/// How per-bin data become resamples. Built once per analysis and applied to every data
/// point, so all quantities share the same resamples (their correlations are kept).
#[derive(Clone, Debug, PartialEq)]
pub enum ResamplePlan {
    /// Delete-one jackknife on `n` bins.
    Jackknife {
        /// Number of bins (= number of samples).
        n: usize,
    },
    /// Bootstrap with `b` samples drawn with replacement from `n` bins.
    Bootstrap {
        /// Number of bins.
        n: usize,
        /// Number of bootstrap samples.
        b: usize,
        /// Per sample, how often each bin is drawn (`b * n` counts, sample-major).
        counts: Vec<u32>,
    },
}

impl ResamplePlan {
    /// Delete-one jackknife on `n` bins.
    pub fn jackknife(n: usize) -> Self {
        ResamplePlan::Jackknife { n }
    }

    /// Bootstrap with `b` samples on `n` bins. Sample `k` draws from its own ChaCha8 stream
    /// (`seed`, stream `k`), so the draws do not depend on thread count or order.
    pub fn bootstrap(n: usize, b: usize, seed: u64) -> Self {
        let mut counts = vec![0u32; b * n];
        for (k, row) in counts.chunks_mut(n.max(1)).enumerate().take(b) {
            let mut rng = ChaCha8Rng::seed_from_u64(seed);
            rng.set_stream(k as u64);
            for _ in 0..n {
                row[rng.gen_range(0..n)] += 1;
            }
        }
        ResamplePlan::Bootstrap { n, b, counts }
    }

    /// The scheme of the samples this plan makes.
    pub fn scheme(&self) -> Scheme {
        match self {
            ResamplePlan::Jackknife { .. } => Scheme::Jackknife,
            ResamplePlan::Bootstrap { .. } => Scheme::Bootstrap,
        }
    }

    /// Number of bins the plan expects.
    pub fn n_bins(&self) -> usize {
        match self {
            ResamplePlan::Jackknife { n } | ResamplePlan::Bootstrap { n, .. } => *n,
        }
    }

    /// Number of samples the plan makes.
    pub fn n_samples(&self) -> usize {
        match self {
            ResamplePlan::Jackknife { n } => *n,
            ResamplePlan::Bootstrap { b, .. } => *b,
        }
    }

    /// The resampled mean of per-bin values `x` (length `n_bins`). Jackknife samples use the
    /// O(N) leave-one-out sums `(S - x_j) / (N - 1)`.
    pub fn mean(&self, x: &[f64]) -> Resampled {
        let n = x.len();
        debug_assert_eq!(n, self.n_bins());
        let total: f64 = x.iter().sum();
        let central = total / n as f64;
        let samples = match self {
            ResamplePlan::Jackknife { .. } => x
                .iter()
                .map(|&xj| (total - xj) / (n as f64 - 1.0))
                .collect(),
            ResamplePlan::Bootstrap { counts, .. } => counts
                .chunks(n)
                .map(|row| row.iter().zip(x).map(|(&c, &v)| c as f64 * v).sum::<f64>() / n as f64)
                .collect(),
        };
        Resampled::new(central, samples, self.scheme())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn jackknife_error_of_mean_is_standard_error() {
        // Identity: the jackknife error of the mean equals s / sqrt(N) (Efron & Tibshirani 1993, §11.2).
        let x: Vec<f64> = (0..37).map(|i| ((i * 7919) % 101) as f64 * 0.37).collect();
        let n = x.len() as f64;
        let m = x.iter().sum::<f64>() / n;
        let s2 = x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0);
        let r = ResamplePlan::jackknife(x.len()).mean(&x);
        assert_relative_eq!(r.central, m, max_relative = 1e-14);
        assert_relative_eq!(r.error(), (s2 / n).sqrt(), max_relative = 1e-12);
    }

    #[test]
    fn bootstrap_plan_is_reproducible() {
        let a = ResamplePlan::bootstrap(20, 50, 7);
        let b = ResamplePlan::bootstrap(20, 50, 7);
        assert_eq!(a, b);
        assert_ne!(a, ResamplePlan::bootstrap(20, 50, 8));
    }
}

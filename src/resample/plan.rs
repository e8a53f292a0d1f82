//! Resample plans: how per-bin data become jackknife or bootstrap samples (docs/methods.md §7;
//! Efron & Tibshirani, *An Introduction to the Bootstrap*, 1993, the bootstrap and jackknife chapters).
//!
//! A plan is built once per analysis and applied to every data point, so all quantities share
//! the same resamples and their correlations are kept.
//!
//! - Jackknife: sample `j` is the mean with bin `j` left out. It is computed in O(N) from the
//!   full mean, `x̄_(j) = x̄ - (x_j - x̄) / (N - 1)`, algebraically the leave-one-out sum
//!   `(S - x_j) / (N - 1)` but free of the cancellation a large common offset would cause.
//!   Samples are stored as absolute values, so the error they give is good to about
//!   `ulp(x̄) (N-1) / (s sqrt(N))` relative (negligible unless the spread `s` is some 1e-8
//!   of the mean or smaller).
//! - Bootstrap: sample `k` draws `N` bins with replacement from its own ChaCha8 stream
//!   (`seed`, stream `k`); the plan stores how often each bin is drawn. The draws therefore do
//!   not depend on the number of threads or the order of evaluation.
//!
//! [`ResamplePlan::means_of_series`] resamples every time slice of a [`Series`] in parallel
//! (rayon); each slice is computed independently and collected in order, so the result is
//! bit-for-bit the same on any number of threads.

use super::value::{stable_mean, Resampled, Scheme};
use crate::data::Series;
use crate::{Error, Result};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Which part of a complex correlator to resample.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Part {
    /// The real part.
    Re,
    /// The imaginary part.
    Im,
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
    /// The plan for `scheme` on `n_bins` bins; `n_boot` and `seed` are used by the bootstrap
    /// only.
    pub fn new(scheme: Scheme, n_bins: usize, n_boot: usize, seed: u64) -> Self {
        match scheme {
            Scheme::Jackknife => ResamplePlan::jackknife(n_bins),
            Scheme::Bootstrap => ResamplePlan::bootstrap(n_bins, n_boot, seed),
        }
    }

    /// Delete-one jackknife on `n` bins.
    pub fn jackknife(n: usize) -> Self {
        ResamplePlan::Jackknife { n }
    }

    /// Bootstrap with `b` samples on `n` bins. Sample `k` draws from its own ChaCha8 stream
    /// (`seed`, stream `k`), so the draws do not depend on thread count or order.
    pub fn bootstrap(n: usize, b: usize, seed: u64) -> Self {
        let mut counts = vec![0u32; b * n];
        if n > 0 {
            counts.par_chunks_mut(n).enumerate().for_each(|(k, row)| {
                let mut rng = ChaCha8Rng::seed_from_u64(seed);
                rng.set_stream(k as u64);
                for _ in 0..n {
                    row[rng.gen_range(0..n)] += 1;
                }
            });
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
    /// O(N) leave-one-out form `x̄ - (x_j - x̄)/(N-1)`. Callers must pass `n_bins` values
    /// (a debug assertion); in release builds a wrong length gives NaN, never wrong numbers.
    /// [`ResamplePlan::checked_mean`] returns an error instead.
    pub fn mean(&self, x: &[f64]) -> Resampled {
        debug_assert_eq!(x.len(), self.n_bins());
        let n = x.len();
        if n == 0 || n != self.n_bins() {
            return Resampled::new(f64::NAN, vec![f64::NAN; self.n_samples()], self.scheme());
        }
        let central = stable_mean(x);
        let samples = match self {
            ResamplePlan::Jackknife { .. } => {
                let denom = n as f64 - 1.0;
                x.iter()
                    .map(|&xj| central - (xj - central) / denom)
                    .collect()
            }
            ResamplePlan::Bootstrap { counts, .. } => counts
                .chunks(n)
                .map(|row| {
                    let shift: f64 = row
                        .iter()
                        .zip(x)
                        .map(|(&c, &v)| c as f64 * (v - central))
                        .sum();
                    central + shift / n as f64
                })
                .collect(),
        };
        Resampled::new(central, samples, self.scheme())
    }

    /// Per sample, the variance of the per-bin values `x` among the bins that sample contains,
    /// as an estimate of the same quantity as the unbiased variance `s²` of all bins (the
    /// per-point variance behind the weights of a fit): for the jackknife the unbiased
    /// variance of the `N - 1` bins it keeps; for the bootstrap `N/(N-1)` times the unbiased
    /// variance of the `N` bins it draws (with their multiplicities), because a bootstrap
    /// sample's unbiased variance has expectation `(N-1)/N s²` (the variance of the empirical
    /// distribution). Either way the average over samples is close to `s²`, and the spread
    /// of these variances is what a fit that recomputed its weights on every resample would
    /// see. Wrong lengths or fewer than three bins give NaN (see [`ResamplePlan::mean`]).
    pub fn sample_variances(&self, x: &[f64]) -> Vec<f64> {
        let n = x.len();
        if n < 3 || n != self.n_bins() {
            return vec![f64::NAN; self.n_samples()];
        }
        let m = stable_mean(x);
        let dev: Vec<f64> = x.iter().map(|v| v - m).collect();
        match self {
            ResamplePlan::Jackknife { .. } => {
                // Leave-one-out sums of squares about the full mean, shifted to the sample's
                // own mean: sum_{i != j} (x_i - m_j)^2 = Q - d_j^2 - (N-1) (m_j - m)^2 with
                // m_j - m = -d_j / (N-1).
                let q: f64 = dev.iter().map(|d| d * d).sum();
                let k = n as f64 - 1.0;
                dev.iter()
                    .map(|d| ((q - d * d - d * d / k) / (k - 1.0)).max(0.0))
                    .collect()
            }
            ResamplePlan::Bootstrap { counts, .. } => {
                let nf = n as f64;
                counts
                    .chunks(n)
                    .map(|row| {
                        let shift: f64 = row
                            .iter()
                            .zip(&dev)
                            .map(|(&c, d)| c as f64 * d)
                            .sum::<f64>()
                            / nf;
                        let q: f64 = row
                            .iter()
                            .zip(&dev)
                            .map(|(&c, d)| c as f64 * (d - shift) * (d - shift))
                            .sum();
                        q / (nf - 1.0) * nf / (nf - 1.0)
                    })
                    .collect()
            }
        }
    }

    /// Per sample, the standard deviation of the bins it contains relative to that of all
    /// bins, `sqrt(sample_variances / s²)`: the factor by which a fit's weights for this point
    /// would change had they been estimated on that sample. 1 for every sample when the bins
    /// do not vary; NaN where [`ResamplePlan::sample_variances`] gives NaN.
    pub fn sample_error_scales(&self, x: &[f64]) -> Vec<f64> {
        let v = self.sample_variances(x);
        let n = x.len() as f64;
        let m = stable_mean(x);
        let s2 = x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (n - 1.0);
        if s2.is_nan() || s2 <= 0.0 {
            return v
                .iter()
                .map(|v| if v.is_nan() { *v } else { 1.0 })
                .collect();
        }
        v.into_iter().map(|v| (v / s2).sqrt()).collect()
    }

    /// [`ResamplePlan::mean`] after checking that `x` has one value per bin and that there are
    /// at least two bins; `what` names the data in the error message.
    pub fn checked_mean(&self, x: &[f64], what: &str) -> Result<Resampled> {
        self.check_bins(x.len(), what)?;
        Ok(self.mean(x))
    }

    /// The resampled mean of every time slice of `s` (one [`Resampled`] per `t`), real or
    /// imaginary part. Slices are resampled in parallel; the result does not depend on the
    /// number of threads. Errors when `s.n_cfg` differs from the plan's number of bins.
    pub fn means_of_series(&self, s: &Series, part: Part) -> Result<Vec<Resampled>> {
        self.check_bins(s.n_cfg, "series")?;
        Ok((0..s.n_t)
            .into_par_iter()
            .map(|t| {
                let x = match part {
                    Part::Re => s.re_at(t),
                    Part::Im => s.im_at(t),
                };
                self.mean(x)
            })
            .collect())
    }

    fn check_bins(&self, got: usize, what: &str) -> Result<()> {
        if got != self.n_bins() {
            return Err(Error::analysis(
                "resample",
                format!(
                    "{what}: {got} bins (configurations after binning) given, but the {} plan \
                     was built for {}",
                    self.scheme(),
                    self.n_bins()
                ),
            ));
        }
        if got < 2 {
            return Err(Error::analysis(
                "resample",
                format!("{what}: {got} bin(s); resampling needs at least 2"),
            ));
        }
        Ok(())
    }
}

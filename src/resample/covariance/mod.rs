//! Covariance of a vector of resampled values, for correlated fits (docs/methods.md §2).
//!
//! The covariance is estimated once from the resamples and held fixed (common practice).
//! Each value `i` contributes one deviation per sample, rescaled so that the deviations act
//! like per-configuration deviations of the data:
//! - jackknife: `y_ki = (N-1)(x_ki - x̄_i)` (for a mean, exactly `-(a_ki - ā_i)` of the bin
//!   data), and `C = Σ_k y_k y_kᵀ / (N (N-1))`, the jackknife covariance;
//! - bootstrap: `y_ki = x_ki - x̄_i` and `C = Σ_k y_k y_kᵀ / (B-1)`.
//!
//! `C` has the scale of [`Resampled::variance`]: its diagonal is the squared errors.
//!
//! Kinds ([`CovarianceKind`]):
//! - `full`: `C`.
//! - `diagonal`: `diag(C)` (uncorrelated weights).
//! - `shrinkage`: `(1-λ) C + λ F`, with the Ledoit–Wolf intensity (Ledoit & Wolf, J.
//!   Multivariate Anal. 88 (2004) 365) or a fixed `λ`. Let `S = (1/n) Σ_k y_k y_kᵀ`.
//!   - target `diagonal` (default, common practice in lattice fits): the correlation matrix is
//!     shrunk toward the identity, i.e. `F = diag(C)` and every off-diagonal element is scaled
//!     by `1-λ`. With standardised deviations `z_ki = y_ki / sqrt(S_ii)`, `r = (1/n) Σ z zᵀ`,
//!     the intensity is `λ = Σ_{i≠j} Var(r_ij) / Σ_{i≠j} r_ij²` with
//!     `Var(r_ij) = (1/n²) Σ_k (z_ki z_kj - r_ij)²` (Ledoit–Wolf's estimator of the noise
//!     of each element, applied to the correlation matrix; the "target D" of Schäfer &
//!     Strimmer, Stat. Appl. Genet. Mol. Biol. 4 (2005) 32), clipped to [0, 1].
//!   - target `identity`: Ledoit & Wolf 2004 as published, `F = μ I` with `μ = tr(C)/d`,
//!     `λ = min(b̄², δ²)/δ²`, `δ² = ‖S - μ_S I‖²`, `b̄² = (1/n²) Σ_k ‖y_k y_kᵀ - S‖²`
//!     (Frobenius norms). This is what `sklearn.covariance.LedoitWolf` computes.
//!
//! For bootstrap samples drawn from `N` bins, [`estimate_with_bins`] takes `N`: the noise
//! terms (`Var(r_ij)`, `b̄²`) are then scaled by `B/N`, because the noise of a covariance
//! estimated from `N` bins does not shrink with the number `B` of bootstrap draws.
//!
//! Eigenvalue cut (`eigen_cut = Some(c)`, `0 < c < 1`): the eigenvalues of the correlation
//! matrix (the covariance scaled to unit diagonal) below `c λ_max` are raised to `c λ_max`,
//! keeping the eigenvectors; the matrix is scaled back with the original errors. Raising
//! (rather than dropping) makes the poorly determined directions less trusted, never more.
//!
//! Small samples (Hartlap, Simon & Schneider, Astron. Astrophys. 464 (2007) 399): the inverse
//! of a covariance estimated from `N` samples of `d` values is biased high by `(N-1)/(N-d-2)`;
//! [`hartlap_factor`] gives the correction factor `(N-d-2)/(N-1)`. A warning is added when
//! `N < 5 d`. A singular or badly conditioned matrix is reported in `warnings` and
//! [`CovarianceEstimate::inverse`] refuses it: nothing is inverted silently.

mod options;
mod shrinkage;

pub use options::{CovarianceKind, CovarianceOptions, ShrinkageTarget};

use super::value::{Resampled, Scheme};
use crate::{Error, Result};
use nalgebra::{DMatrix, SymmetricEigen};

/// Condition number of the correlation matrix above which a warning is given.
pub const WARN_CONDITION: f64 = 1e8;
/// Condition number of the correlation matrix above which [`CovarianceEstimate::inverse`]
/// refuses to invert.
pub const MAX_CONDITION: f64 = 1e13;

/// An estimated covariance with the diagnostics a fit report needs.
#[derive(Clone, Debug, PartialEq)]
pub struct CovarianceEstimate {
    /// The `d × d` covariance, on the scale of the squared errors.
    pub matrix: DMatrix<f64>,
    /// Condition number (largest / smallest eigenvalue) of the correlation matrix, i.e. the
    /// covariance scaled to unit diagonal; infinite when singular.
    pub condition_number: f64,
    /// The shrinkage intensity used, for shrinkage estimates.
    pub shrinkage: Option<f64>,
    /// Number of eigenvalues raised by the eigenvalue cut.
    pub n_eigen_cut: usize,
    /// Everything a user should know before trusting the inverse.
    pub warnings: Vec<String>,
}

impl CovarianceEstimate {
    /// The inverse covariance, refused (with the reason) when the matrix is not positive
    /// definite or its correlation matrix has condition number above [`MAX_CONDITION`].
    pub fn inverse(&self) -> Result<DMatrix<f64>> {
        if self.condition_number.is_nan() || self.condition_number > MAX_CONDITION {
            return Err(Error::analysis(
                "covariance",
                format!(
                    "the covariance is singular or too badly conditioned to invert (condition \
                     number {:.3e} of the correlation matrix, limit {MAX_CONDITION:.0e}); use an \
                     eigenvalue cut, shrinkage, a diagonal covariance, or fewer points",
                    self.condition_number
                ),
            ));
        }
        match self.matrix.clone().cholesky() {
            Some(c) => Ok(c.inverse()),
            None => Err(Error::analysis(
                "covariance",
                "the covariance is not positive definite; use an eigenvalue cut or shrinkage",
            )),
        }
    }
}

/// Hartlap et al. (2007) factor `(n - d - 2)/(n - 1)` that removes the bias of the inverse of
/// a covariance estimated from `n` samples of `d` values (multiply the inverse by it);
/// `None` when `n <= d + 2`, where no unbiased inverse exists.
pub fn hartlap_factor(n: usize, d: usize) -> Option<f64> {
    if n > d + 2 {
        Some((n - d - 2) as f64 / (n - 1) as f64)
    } else {
        None
    }
}

/// Estimate the covariance of `values` (all from one resample plan). For bootstrap values,
/// the samples are treated as independent observations; prefer [`estimate_with_bins`], which
/// knows the number of bins they were drawn from.
pub fn estimate(values: &[Resampled], opts: &CovarianceOptions) -> Result<CovarianceEstimate> {
    let n = values.first().map_or(0, Resampled::len);
    estimate_with_bins(values, opts, n)
}

/// Estimate the covariance of `values`, resampled from `n_bins` independent bins
/// (`plan.n_bins()`). For a jackknife `n_bins` must equal the number of samples.
pub fn estimate_with_bins(
    values: &[Resampled],
    opts: &CovarianceOptions,
    n_bins: usize,
) -> Result<CovarianceEstimate> {
    check_inputs(values, opts, n_bins)?;
    if matches!(opts.kind, CovarianceKind::Diagonal) && opts.eigen_cut.is_none() {
        return diagonal_estimate(values, opts, n_bins);
    }
    let n = values[0].len();
    let y = deviations(values);
    let full = sample_covariance(&y, values[0].scheme)?;
    // Noise terms are averages over n samples; for bootstrap they stand for n_bins bins.
    let noise_scale = n as f64 / n_bins as f64;
    let (mut matrix, shrinkage) = match opts.kind {
        CovarianceKind::Full => (full, None),
        CovarianceKind::Diagonal => (DMatrix::from_diagonal(&full.diagonal()), None),
        CovarianceKind::Shrinkage { target, intensity } => {
            let (m, lambda) = shrinkage::shrink(full, &y, target, intensity, noise_scale)?;
            (m, Some(lambda))
        }
    };
    let mut n_eigen_cut = 0;
    if let Some(c) = opts.eigen_cut {
        let (m, k) = eigen_floor(&matrix, c);
        matrix = m;
        n_eigen_cut = k;
    }
    let condition_number = correlation_condition(&matrix);
    let warnings = diagnose(
        condition_number,
        opts,
        shrinkage.is_some(),
        n_bins,
        values.len(),
    );
    Ok(CovarianceEstimate {
        matrix,
        condition_number,
        shrinkage,
        n_eigen_cut,
        warnings,
    })
}

/// The diagonal covariance without forming the off-diagonal products (`d` variances in
/// `O(d n)` instead of the `O(d^2 n)` product and an eigen-decomposition): the same deviations,
/// normalisation, zero-variance error and warnings as the general path, whose diagonal it
/// equals to rounding (the matrix product sums in another order). The correlation matrix of a
/// diagonal covariance is the identity up to the rounding of `v / (sqrt(v) sqrt(v))`; its
/// condition number is computed from those diagonal entries, as an eigen-decomposition of a
/// diagonal matrix returns them.
fn diagonal_estimate(
    values: &[Resampled],
    opts: &CovarianceOptions,
    n_bins: usize,
) -> Result<CovarianceEstimate> {
    let d = values.len();
    let mut variances = Vec::with_capacity(d);
    for (i, v) in values.iter().enumerate() {
        let var = diagonal_variance(v);
        if var <= 0.0 {
            return Err(zero_variance(i, d));
        }
        variances.push(var);
    }
    Ok(diagonal_from_variances(variances, opts, n_bins))
}

/// One value's variance as [`estimate_with_bins`] computes it for a diagonal covariance (its
/// samples' deviations from their mean, normalised for the resampling scheme). A caller that
/// keeps it per value gets the same estimate from [`diagonal_from_variances`].
pub fn diagonal_variance(v: &Resampled) -> f64 {
    let n = v.len();
    let (scale, norm) = (deviation_scale(n, v.scheme), product_norm(n, v.scheme));
    let mean = v.sample_mean();
    let sum: f64 = v
        .samples
        .iter()
        .map(|x| {
            let y = (x - mean) * scale;
            y * y
        })
        .sum();
    sum * norm
}

/// The diagonal estimate of [`estimate_with_bins`] from its variances ([`diagonal_variance`]
/// of each value, all positive; values that pass its input checks, with no eigenvalue cut),
/// with its condition number and warnings.
pub fn diagonal_from_variances(
    variances: Vec<f64>,
    opts: &CovarianceOptions,
    n_bins: usize,
) -> CovarianceEstimate {
    let d = variances.len();
    let (lo, hi) = variances
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(lo, hi), &v| {
            let sd = v.sqrt();
            let r = v / (sd * sd);
            (lo.min(r), hi.max(r))
        });
    let condition_number = if lo > 0.0 && hi.is_finite() {
        hi / lo
    } else {
        f64::INFINITY
    };
    let warnings = diagnose(condition_number, opts, false, n_bins, d);
    CovarianceEstimate {
        matrix: DMatrix::from_diagonal(&nalgebra::DVector::from_vec(variances)),
        condition_number,
        shrinkage: None,
        n_eigen_cut: 0,
        warnings,
    }
}

/// Refuse what no covariance can be estimated from: one plan, at least two samples and
/// bins (a jackknife's samples are its bins), finite values, an eigenvalue cut in (0, 1).
fn check_inputs(values: &[Resampled], opts: &CovarianceOptions, n_bins: usize) -> Result<()> {
    Resampled::check_compatible(values, "covariance")?;
    let d = values.len();
    let n = values[0].len();
    let scheme = values[0].scheme;
    if n < 2 {
        return Err(Error::analysis(
            "covariance",
            format!("{n} sample(s); a covariance needs at least 2"),
        ));
    }
    if scheme == Scheme::Jackknife && n_bins != n {
        return Err(Error::analysis(
            "covariance",
            format!("jackknife with {n} samples cannot come from {n_bins} bins"),
        ));
    }
    if n_bins < 2 {
        return Err(Error::analysis(
            "covariance",
            format!("{n_bins} bin(s); a covariance needs at least 2"),
        ));
    }
    if let Some(i) = values.iter().position(|v| !v.is_finite()) {
        return Err(Error::analysis(
            "covariance",
            format!(
                "fitted point {} of {d} has a non-finite central value or resample",
                i + 1
            ),
        ));
    }
    if let Some(c) = opts.eigen_cut {
        if !(c > 0.0 && c < 1.0) {
            return Err(Error::analysis(
                "covariance",
                format!("eigen_cut = {c}; expected a number between 0 and 1 (e.g. 1e-3)"),
            ));
        }
    }
    Ok(())
}

/// The sample covariance `C` of the deviations `y` (module docs), refused when a value has
/// zero variance.
fn sample_covariance(y: &DMatrix<f64>, scheme: Scheme) -> Result<DMatrix<f64>> {
    let (n, d) = y.shape();
    let full = y.transpose() * y * product_norm(n, scheme);
    if let Some(i) = (0..d).find(|&i| full[(i, i)] <= 0.0) {
        return Err(zero_variance(i, d));
    }
    Ok(full)
}

/// The error for point `i` (of `d`) without variance.
fn zero_variance(i: usize, d: usize) -> Error {
    Error::analysis(
        "covariance",
        format!(
            "fitted point {} of {d} is the same on every resample (zero variance), so it \
             cannot be weighted in a fit; constant data, or values so small that their \
             squares underflow?",
            i + 1
        ),
    )
}

/// What a user should know before trusting the inverse: a singular or badly conditioned
/// matrix, and the small-sample bias of the inverse (Hartlap et al. 2007).
fn diagnose(
    condition_number: f64,
    opts: &CovarianceOptions,
    shrunk: bool,
    n_bins: usize,
    d: usize,
) -> Vec<String> {
    let mut warnings = Vec::new();
    if condition_number.is_nan() || condition_number > MAX_CONDITION {
        warnings.push(format!(
            "the covariance is singular or nearly so (condition number {condition_number:.3e} of \
             the correlation matrix); it will not be inverted — use an eigenvalue cut, shrinkage \
             or a diagonal covariance"
        ));
    } else if condition_number > WARN_CONDITION {
        warnings.push(format!(
            "the covariance is badly conditioned (condition number {condition_number:.3e} of the \
             correlation matrix); consider an eigenvalue cut or shrinkage"
        ));
    }
    let uses_correlations = !matches!(opts.kind, CovarianceKind::Diagonal);
    if uses_correlations && n_bins < 5 * d {
        let bias = match hartlap_factor(n_bins, d) {
            Some(h) => format!("biased high by about {:.2} times", 1.0 / h),
            None => "not even unbiasedly estimable (N <= d + 2)".to_string(),
        };
        let advice = if shrunk {
            "shrinkage reduces this bias by an amount not quantified here"
        } else {
            "consider shrinkage, a diagonal covariance or fewer points"
        };
        warnings.push(format!(
            "{n_bins} independent samples for {d} correlated values: the sample covariance's \
             inverse is {bias} (Hartlap et al. 2007); {advice}"
        ));
    }
    warnings
}

/// The factor of each sample's deviation from the sample mean: `n - 1` for the jackknife
/// (whose samples lie `n - 1` times closer together than the bins), 1 for the bootstrap.
fn deviation_scale(n: usize, scheme: Scheme) -> f64 {
    match scheme {
        Scheme::Jackknife => n as f64 - 1.0,
        Scheme::Bootstrap => 1.0,
    }
}

/// The normalisation of a sum of products of scaled deviations over `n` samples:
/// `1/(n (n-1))` for the jackknife, `1/(n-1)` for the bootstrap.
fn product_norm(n: usize, scheme: Scheme) -> f64 {
    match scheme {
        Scheme::Jackknife => 1.0 / (n as f64 * (n as f64 - 1.0)),
        Scheme::Bootstrap => 1.0 / (n as f64 - 1.0),
    }
}

/// Deviation matrix `y` (`n × d`): per-configuration-like deviations of every sample.
fn deviations(values: &[Resampled]) -> DMatrix<f64> {
    // safe: the caller has run `check_compatible` (non-empty, one plan).
    let n = values[0].len();
    let scale = deviation_scale(n, values[0].scheme);
    let means: Vec<f64> = values.iter().map(Resampled::sample_mean).collect();
    DMatrix::from_fn(n, values.len(), |k, i| {
        (values[i].samples[k] - means[i]) * scale
    })
}

/// `D^{-1/2} m D^{-1/2}` and the diagonal scale `D^{1/2}`.
fn to_correlation(m: &DMatrix<f64>) -> (DMatrix<f64>, Vec<f64>) {
    let sd: Vec<f64> = m.diagonal().iter().map(|v| v.sqrt()).collect();
    let r = DMatrix::from_fn(m.nrows(), m.ncols(), |i, j| m[(i, j)] / (sd[i] * sd[j]));
    (r, sd)
}

/// Raise correlation-matrix eigenvalues below `cut * λ_max` to that floor; returns the new
/// covariance and how many eigenvalues were raised.
fn eigen_floor(m: &DMatrix<f64>, cut: f64) -> (DMatrix<f64>, usize) {
    let (r, sd) = to_correlation(m);
    let eig = SymmetricEigen::new(r);
    let max = eig.eigenvalues.max();
    let floor = cut * max;
    let mut count = 0;
    let raised = eig.eigenvalues.map(|l| {
        if l < floor {
            count += 1;
            floor
        } else {
            l
        }
    });
    let r2 = &eig.eigenvectors * DMatrix::from_diagonal(&raised) * eig.eigenvectors.transpose();
    let out = DMatrix::from_fn(m.nrows(), m.ncols(), |i, j| {
        let v = if i == j {
            r2[(i, i)]
        } else {
            0.5 * (r2[(i, j)] + r2[(j, i)])
        };
        v * sd[i] * sd[j]
    });
    (out, count)
}

/// Condition number of the correlation matrix of `m` (infinite when not positive definite).
fn correlation_condition(m: &DMatrix<f64>) -> f64 {
    let (r, _) = to_correlation(m);
    let eig = SymmetricEigen::new(r);
    let (min, max) = (eig.eigenvalues.min(), eig.eigenvalues.max());
    if min > 0.0 && max.is_finite() {
        max / min
    } else {
        f64::INFINITY
    }
}

//! Residual whitening from a data covariance (docs/methods.md §2, correlated chi-square).
//!
//! `chi2 = r^T Cov^{-1} r = |W r|^2` with `W^T W = Cov^{-1}`. `W` is built from the Cholesky
//! factor of the *correlation* matrix, `Cov = D R D`, `R = U U^T`: `W = U^{-1} D^{-1}`, which is
//! lower triangular (the transpose of an upper-triangular Cholesky-type factor of `Cov^{-1}`).
//! Working on the correlation matrix keeps the condition number meaningful for data whose
//! variances span many orders of magnitude (two-point functions): a covariance is refused when
//! its correlation matrix is not positive definite or is worse conditioned than
//! [`Weights::MAX_CONDITION`] (common practice: never invert a singular matrix silently).

use crate::error::{Error, Result};
use crate::resample::covariance::{self, CovarianceKind, CovarianceOptions, ShrinkageTarget};
use crate::resample::Resampled;
use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};

/// How the points of a fit or a least-squares solve are weighted: the one weighting setting
/// of the decomposition and the Q² fits (`weights: diagonal | full | shrinkage`). The ratio
/// fits use the same kinds through their `covariance` block, which adds an eigenvalue cut
/// and an explicit shrinkage intensity.
#[derive(
    Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize, schemars::JsonSchema,
)]
#[serde(rename_all = "lowercase")]
pub enum Weighting {
    /// Inverse resampled variances of each point.
    #[default]
    Diagonal,
    /// The full covariance of the points, estimated from the resamples.
    Full,
    /// The covariance shrunk toward its diagonal with the Ledoit–Wolf intensity.
    Shrinkage,
}

impl Weighting {
    /// The covariance estimate this weighting asks for (`None`: diagonal, no estimate).
    pub fn covariance_kind(self) -> Option<CovarianceKind> {
        match self {
            Weighting::Diagonal => None,
            Weighting::Full => Some(CovarianceKind::Full),
            Weighting::Shrinkage => Some(CovarianceKind::Shrinkage {
                target: ShrinkageTarget::Diagonal,
                intensity: None,
            }),
        }
    }

    /// Weights for `values` (one resample plan), estimated once from the resamples. The
    /// caller checks beforehand that every error is positive and finite.
    pub fn weights(self, values: &[Resampled]) -> Result<Weights> {
        let Some(kind) = self.covariance_kind() else {
            let errors: Vec<f64> = values.iter().map(Resampled::error).collect();
            return Ok(Weights::diagonal(&errors));
        };
        let opts = CovarianceOptions {
            kind,
            eigen_cut: None,
        };
        let cov = covariance::estimate(values, &opts)?;
        Weights::from_covariance(&cov.matrix)
    }
}

/// Whitening of residuals: full (from a covariance) or diagonal (from errors).
#[derive(Clone, Debug, PartialEq)]
pub struct Weights {
    /// Lower-triangular whitening matrix `W` (`W^T W = Cov^{-1}`).
    whitening: DMatrix<f64>,
    /// Condition number of the correlation matrix (1 for diagonal weights).
    condition: f64,
    /// Every off-diagonal entry of `whitening` is exactly zero (uncorrelated weights, however
    /// they were built): [`Weights::whiten`] then multiplies the diagonal only.
    diagonal: bool,
}

impl Weights {
    /// Largest accepted condition number of the correlation matrix.
    pub const MAX_CONDITION: f64 = 1e12;

    /// Weights from a covariance matrix. Errors when the matrix is not square, not finite,
    /// has a non-positive variance, is not positive definite, or its correlation matrix has a
    /// condition number above [`Weights::MAX_CONDITION`]; the message states the condition
    /// number.
    pub fn from_covariance(cov: &DMatrix<f64>) -> Result<Weights> {
        let n = cov.nrows();
        if n == 0 || cov.ncols() != n {
            return Err(Error::analysis(
                "fit",
                format!(
                    "covariance is {}x{}; expected a non-empty square matrix",
                    cov.nrows(),
                    cov.ncols()
                ),
            ));
        }
        if cov.iter().any(|x| !x.is_finite()) {
            return Err(Error::analysis(
                "fit",
                "covariance contains NaN or infinite entries",
            ));
        }
        let d: Vec<f64> = (0..n).map(|i| cov[(i, i)]).collect();
        if let Some(i) = d.iter().position(|&v| v <= 0.0) {
            return Err(Error::analysis(
                "fit",
                format!(
                    "covariance has variance {} at point {i}; expected positive variances",
                    d[i]
                ),
            ));
        }
        let s: Vec<f64> = d.iter().map(|v| v.sqrt()).collect();
        if off_diagonal_zero(cov) {
            if let Some(w) = Self::uncorrelated(&d, &s) {
                return Ok(w);
            }
        }
        Self::correlated(cov, &s)
    }

    /// [`Weights::from_covariance`] for a covariance without correlations, in `O(n)` instead
    /// of the eigen-decomposition and Cholesky factorisation of an identity correlation
    /// matrix: the same operations on the diagonal, so the same bits (unit test
    /// `uncorrelated_covariances_give_the_general_paths_bits`). `None` when a diagonal of the
    /// correlation matrix is not a finite positive number (variances so small that `s * s`
    /// underflows): the general path judges those.
    fn uncorrelated(d: &[f64], s: &[f64]) -> Option<Weights> {
        let n = d.len();
        let corr: Vec<f64> = d
            .iter()
            .zip(s)
            .map(|(v, s)| 0.5 * (v + v) / (s * s))
            .collect();
        if corr.iter().any(|c| !c.is_finite() || *c <= 0.0) {
            return None;
        }
        let (lmin, lmax) = corr.iter().fold((f64::INFINITY, 0.0f64), |(lo, hi), c| {
            (lo.min(*c), hi.max(*c))
        });
        let mut w = DMatrix::zeros(n, n);
        for (i, (c, s)) in corr.iter().zip(s).enumerate() {
            // Cholesky of a diagonal: sqrt; its triangular inverse: the reciprocal.
            w[(i, i)] = (1.0 / c.sqrt()) / s;
        }
        Some(Weights {
            whitening: w,
            condition: lmax / lmin,
            diagonal: true,
        })
    }

    /// [`Weights::from_covariance`] for any covariance (variances checked, `s` their square
    /// roots): through the correlation matrix's eigenvalues and Cholesky factor.
    fn correlated(cov: &DMatrix<f64>, s: &[f64]) -> Result<Weights> {
        let n = cov.nrows();
        let corr = DMatrix::from_fn(n, n, |i, j| {
            0.5 * (cov[(i, j)] + cov[(j, i)]) / (s[i] * s[j])
        });
        let eig = corr.clone().symmetric_eigen();
        let lmax = eig.eigenvalues.max();
        let lmin = eig.eigenvalues.min();
        let condition = if lmin > 0.0 {
            lmax / lmin
        } else {
            f64::INFINITY
        };
        if condition.is_nan() || condition > Self::MAX_CONDITION {
            return Err(Error::analysis(
                "fit",
                format!(
                    "covariance is singular or not positive definite: condition number of the \
                     correlation matrix {condition:.3e} (smallest eigenvalue {lmin:.3e}); accepted \
                     up to {:.0e} — use shrinkage, an eigenvalue cut or diagonal weights",
                    Self::MAX_CONDITION
                ),
            ));
        }
        let chol = corr.cholesky().ok_or_else(|| {
            Error::analysis(
                "fit",
                format!(
                    "Cholesky factorisation of the correlation matrix failed (condition number {condition:.3e})"
                ),
            )
        })?;
        let u = chol.l();
        let mut w = u
            .solve_lower_triangular(&DMatrix::identity(n, n))
            .ok_or_else(|| {
                Error::analysis("fit", "triangular inverse of the Cholesky factor failed")
            })?;
        for j in 0..n {
            for i in 0..n {
                w[(i, j)] /= s[j];
            }
        }
        let diagonal = off_diagonal_zero(&w);
        Ok(Weights {
            whitening: w,
            condition,
            diagonal,
        })
    }

    /// Uncorrelated weights from one standard deviation per point. Non-positive or
    /// non-finite sigmas make every residual of that point NaN, which the fitters report.
    pub fn diagonal(sigmas: &[f64]) -> Weights {
        let n = sigmas.len();
        let mut w = DMatrix::zeros(n, n);
        for (i, s) in sigmas.iter().enumerate() {
            w[(i, i)] = if *s > 0.0 && s.is_finite() {
                1.0 / s
            } else {
                f64::NAN
            };
        }
        Weights {
            whitening: w,
            condition: 1.0,
            diagonal: true,
        }
    }

    /// Unit weights (ordinary least squares) on `n` points.
    pub fn unit(n: usize) -> Weights {
        Weights::diagonal(&vec![1.0; n])
    }

    /// The same weights for data whose standard deviations are `scales[i]` times those these
    /// weights were built for, with the correlations unchanged: `Cov' = S Cov S` with
    /// `S = diag(scales)`, so `W' = W S^{-1}` (column `i` of `W` divided by `scales[i]`).
    /// A resample's fit uses it to weight its points by that resample's own errors (see
    /// [`crate::resample::ResamplePlan::sample_variances`]). A scale that is not positive and
    /// finite leaves its column unchanged, as does a missing one.
    pub fn rescaled(&self, scales: &[f64]) -> Weights {
        let mut out = self.clone();
        let n = self.len();
        for (j, column) in out
            .whitening
            .as_mut_slice()
            .chunks_mut(n.max(1))
            .enumerate()
        {
            let s = scales.get(j).copied().unwrap_or(1.0);
            if s > 0.0 && s.is_finite() {
                column.iter_mut().for_each(|v| *v /= s);
            }
        }
        out
    }

    /// Number of data points.
    pub fn len(&self) -> usize {
        self.whitening.nrows()
    }

    /// True for zero points.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Condition number of the correlation matrix (1 for diagonal weights).
    pub fn condition_number(&self) -> f64 {
        self.condition
    }

    /// The diagonal of `W` when the weights are uncorrelated (every entry of `W` off its
    /// diagonal exactly zero), else `None`.
    pub fn diagonal_factors(&self) -> Option<Vec<f64>> {
        self.diagonal
            .then(|| self.whitening.diagonal().iter().copied().collect())
    }

    /// The whitening matrix `W` (`W^T W = Cov^{-1}`).
    pub fn matrix(&self) -> &DMatrix<f64> {
        &self.whitening
    }

    /// `out = W r` (lower-triangular product).
    pub fn whiten(&self, r: &[f64], out: &mut [f64]) {
        let len = self.len();
        let n = len.min(r.len()).min(out.len());
        let w = self.whitening.as_slice();
        if self.diagonal && r[..n].iter().all(|v| v.is_finite()) {
            // The triangular product's terms off the diagonal are all `0 * r[j] = +-0`, and a
            // sum of signed zeros started from `+0` is `+0`: so `out[i] = 0 + W[i][i] r[i]`,
            // the same bits. (A non-finite `r[j]` would make `0 * r[j]` NaN in every later
            // row: the general product below keeps that.)
            for (i, (o, x)) in out[..n].iter_mut().zip(&r[..n]).enumerate() {
                *o = 0.0 + w[i * len + i] * x;
            }
            return;
        }
        macro_rules! fixed {
            ($($k:literal)*) => {
                match n {
                    $($k => whiten_fixed::<$k>(w, len, r, out),)*
                    _ => whiten_any(w, len, n, r, out),
                }
            };
        }
        fixed!(1 2 3 4 5 6 7 8 9 10 11 12 13 14 15 16);
    }

    /// `out = W^T u` (upper-triangular product).
    pub fn whiten_transposed(&self, u: &[f64], out: &mut [f64]) {
        let n = self.len().min(u.len()).min(out.len());
        for (j, o) in out.iter_mut().enumerate().take(n) {
            let col = &self.whitening.as_slice()[j * self.len()..(j + 1) * self.len()];
            *o = col[j..n].iter().zip(&u[j..n]).map(|(w, x)| w * x).sum();
        }
    }

    /// `W A` for a matrix with `len()` rows.
    pub fn whiten_matrix(&self, a: &DMatrix<f64>) -> DMatrix<f64> {
        let mut out = DMatrix::zeros(a.nrows(), a.ncols());
        self.whiten_into(a, &mut out);
        out
    }

    /// Write `W A` into the first `len()` rows of `out` (same number of columns as `A`,
    /// at least `len()` rows); rows below are left untouched. No allocation.
    pub fn whiten_into(&self, a: &DMatrix<f64>, out: &mut DMatrix<f64>) {
        let (rows_a, rows_out) = (a.nrows(), out.nrows());
        self.whiten_columns(a.as_slice(), rows_a, out.as_mut_slice(), rows_out);
    }

    /// [`Self::whiten_into`] on column-major storage: `a` holds columns of `rows_a` values,
    /// `out` columns of `rows_out >= len()` values; column `c` of `out` gets `W` times column
    /// `c` of `a` in its first `len()` rows.
    pub(crate) fn whiten_columns(
        &self,
        a: &[f64],
        rows_a: usize,
        out: &mut [f64],
        rows_out: usize,
    ) {
        let n = self.len();
        let columns_out = out.chunks_mut(rows_out.max(1));
        for (c, o) in a.chunks(rows_a.max(1)).zip(columns_out) {
            self.whiten(c, &mut o[..n]);
        }
    }

    /// `chi2 = |W r|^2`.
    pub fn chi2(&self, r: &[f64]) -> f64 {
        let mut w = vec![0.0; r.len()];
        self.whiten(r, &mut w);
        w.iter().map(|x| x * x).sum()
    }
}

/// True when every entry of `w` off its diagonal is exactly zero.
fn off_diagonal_zero(w: &DMatrix<f64>) -> bool {
    let n = w.nrows();
    w.as_slice()
        .iter()
        .enumerate()
        .all(|(k, v)| *v == 0.0 || k % n.max(1) == k / n.max(1))
}

/// `out[..n] = W r` for the `n x n` lower triangle of the column-major `w` (columns of `len`
/// values): every `out[i]` sums `W[i][j] r[j]` over `j = 0..=i` in that order, starting from
/// zero. [`whiten_fixed`] does the same operations in the same order with the size known at
/// compile time (its loops unrolled), so both give the same bits.
fn whiten_any(w: &[f64], len: usize, n: usize, r: &[f64], out: &mut [f64]) {
    out[..n].fill(0.0);
    // Column by column: `W` is stored column-major, so this walks memory in order.
    for (j, rj) in r.iter().enumerate().take(n) {
        let col = &w[j * len..(j + 1) * len];
        for (o, w) in out[j..n].iter_mut().zip(&col[j..n]) {
            *o += w * rj;
        }
    }
}

/// [`whiten_any`] for `n = N` (the caller checks that `w`, `r` and `out` are long enough).
fn whiten_fixed<const N: usize>(w: &[f64], len: usize, r: &[f64], out: &mut [f64]) {
    let mut acc = [0.0; N];
    for (j, rj) in r.iter().enumerate().take(N) {
        let col = &w[j * len..j * len + N];
        for i in j..N {
            acc[i] += col[i] * rj;
        }
    }
    out[..N].copy_from_slice(&acc);
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// `w.whiten(r)` equals, bit for bit, every `W[i][j] r[j]` for `j <= i` summed in order of
    /// `j` from `+0` (the definition the kernels must follow).
    fn assert_whitens_as_the_triangular_product(w: &Weights, r: &[f64], what: &str) {
        let mut got = vec![0.0; r.len()];
        w.whiten(r, &mut got);
        for (i, g) in got.iter().enumerate() {
            let mut want = 0.0;
            for (j, rj) in r.iter().enumerate().take(i + 1) {
                want += w.matrix()[(i, j)] * rj;
            }
            assert_eq!(g.to_bits(), want.to_bits(), "{what}, row {i}");
        }
    }

    #[test]
    fn whitening_reproduces_inverse_covariance() {
        // Identity W^T W = Cov^{-1} (definition of whitening).
        let cov =
            DMatrix::from_row_slice(3, 3, &[4.0, 1.2, 0.003, 1.2, 9.0, 0.02, 0.003, 0.02, 1e-4]);
        let w = Weights::from_covariance(&cov).unwrap();
        let prod = w.matrix().transpose() * w.matrix() * &cov;
        assert_relative_eq!(prod, DMatrix::identity(3, 3), epsilon = 1e-9);
    }

    #[test]
    fn rescaled_weights_whiten_the_rescaled_covariance() {
        // W'^T W' = (S Cov S)^{-1} (definition of whitening, with S = diag(scales)).
        let cov = DMatrix::from_row_slice(3, 3, &[4.0, 1.2, 0.3, 1.2, 9.0, 0.2, 0.3, 0.2, 1.0]);
        let scales = [0.8, 1.3, 1.05];
        let s = DMatrix::from_diagonal(&nalgebra::DVector::from_row_slice(&scales));
        let w = Weights::from_covariance(&cov).unwrap().rescaled(&scales);
        let prod = w.matrix().transpose() * w.matrix() * (&s * &cov * &s);
        assert_relative_eq!(prod, DMatrix::identity(3, 3), epsilon = 1e-9);
    }

    #[test]
    fn whitening_of_every_size_is_the_plain_triangular_product_bit_for_bit() {
        // Definition: out[i] = sum_{j <= i} W[i][j] r[j], summed in order of j from zero; the
        // compile-time-size kernels must do exactly that (same bits as the loop below).
        for n in 1..=18 {
            let cov = DMatrix::from_fn(n, n, |i, j| {
                let d = (i as f64 - j as f64).abs();
                (0.6f64).powf(d) * (1.0 + 0.1 * i as f64) * (1.0 + 0.1 * j as f64)
            });
            let w = Weights::from_covariance(&cov).unwrap();
            let r: Vec<f64> = (0..n).map(|i| (1.3 * i as f64 + 0.7).sin()).collect();
            assert_whitens_as_the_triangular_product(&w, &r, &format!("n {n}"));
        }
    }

    #[test]
    fn diagonal_weights_whiten_bit_for_bit_as_the_triangular_product() {
        // Definition as above (every W[i][j] r[j] for j <= i summed in order from +0): the
        // diagonal shortcut must give the same bits, the sign of a zero and the NaN that a
        // non-finite value spreads into later rows included.
        for n in 1..=18 {
            let cov =
                DMatrix::from_fn(n, n, |i, j| if i == j { 0.3 + 0.2 * i as f64 } else { 0.0 });
            let from_cov = Weights::from_covariance(&cov).unwrap();
            let sigmas: Vec<f64> = (0..n).map(|i| (0.3 + 0.2 * i as f64).sqrt()).collect();
            let scales: Vec<f64> = (0..n).map(|i| 1.0 + 0.01 * i as f64).collect();
            for w in [
                from_cov.clone(),
                Weights::diagonal(&sigmas),
                from_cov.rescaled(&scales),
            ] {
                assert!(w.diagonal, "n {n}");
                for case in 0..3 {
                    let mut r: Vec<f64> = (0..n).map(|i| (1.3 * i as f64 + 0.7).sin()).collect();
                    match case {
                        1 => r[0] = -0.0,
                        2 => r[n / 2] = f64::INFINITY,
                        _ => {}
                    }
                    assert_whitens_as_the_triangular_product(
                        &w,
                        &r,
                        &format!("n {n}, case {case}"),
                    );
                }
            }
        }
        // Correlated weights never take the shortcut.
        let cov = DMatrix::from_row_slice(2, 2, &[1.0, 0.5, 0.5, 1.0]);
        assert!(!Weights::from_covariance(&cov).unwrap().diagonal);
    }

    #[test]
    fn uncorrelated_covariances_give_the_general_paths_bits() {
        // The shortcut must reproduce the eigen/Cholesky path exactly (its definition), over
        // variances spanning many orders of magnitude.
        for n in [1, 2, 7, 45] {
            let d: Vec<f64> = (0..n)
                .map(|i| (1.7 + (3.1 * i as f64).sin()) * 10f64.powi((i as i32 * 37) % 41 - 20))
                .collect();
            let cov = DMatrix::from_fn(n, n, |i, j| if i == j { d[i] } else { 0.0 });
            let s: Vec<f64> = d.iter().map(|v| v.sqrt()).collect();
            let fast = Weights::from_covariance(&cov).unwrap();
            let general = Weights::correlated(&cov, &s).unwrap();
            assert!(fast.diagonal && general.diagonal, "n {n}");
            for i in 0..n {
                assert_eq!(
                    fast.matrix()[(i, i)].to_bits(),
                    general.matrix()[(i, i)].to_bits(),
                    "n {n}, point {i}"
                );
            }
            assert!((fast.condition_number() - general.condition_number()).abs() < 1e-12);
        }
    }

    #[test]
    fn singular_covariance_is_an_error_naming_the_condition_number() {
        let cov = DMatrix::from_row_slice(2, 2, &[1.0, 1.0, 1.0, 1.0]);
        let e = Weights::from_covariance(&cov).unwrap_err().to_string();
        assert!(e.contains("condition number"), "{e}");
    }
}

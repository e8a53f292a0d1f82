//! The per-resample designs of a fixed-gap two-state fit ([`super::fixed`]), computed once
//! per channel and shared by the real and imaginary fits and by the fit without the smallest
//! separation.

use nalgebra::DMatrix;

/// The design of every resample, column-major one after the other.
#[derive(Default)]
pub(super) struct DesignCache {
    values: Vec<f64>,
    /// Values per design (`points x n_params`).
    size: usize,
}

impl DesignCache {
    /// The designs of `n_samples` resamples of `rows x cols`, `fill(k, x)` writing that of
    /// resample `k` into `x`; empty without rows or columns.
    pub(super) fn compute(
        rows: usize,
        cols: usize,
        n_samples: usize,
        mut fill: impl FnMut(usize, &mut DMatrix<f64>),
    ) -> DesignCache {
        let size = rows * cols;
        if size == 0 {
            return DesignCache::default();
        }
        let mut values = vec![0.0; size * n_samples];
        let mut x = DMatrix::zeros(rows, cols);
        for (k, chunk) in values.chunks_mut(size).enumerate() {
            fill(k, &mut x);
            chunk.copy_from_slice(x.as_slice());
        }
        DesignCache { values, size }
    }

    /// The design of resample `k`, if cached.
    fn get(&self, k: usize) -> Option<&[f64]> {
        let start = k.checked_mul(self.size)?;
        self.values.get(start..start.checked_add(self.size)?)
    }

    /// Writes into `x` the cached design of resample `k` without its first `skip` rows;
    /// `false` (and `x` untouched) when there is none of that shape (or it has no rows).
    pub(super) fn copy_rows(&self, k: usize, skip: usize, x: &mut DMatrix<f64>) -> bool {
        let (rows, cols) = x.shape();
        let Some(a) = self.get(k) else {
            return false;
        };
        let cached_rows = skip + rows;
        if cached_rows == 0 || a.len() != cached_rows * cols {
            return false;
        }
        for (c, column) in a.chunks_exact(cached_rows).enumerate() {
            x.column_mut(c).copy_from_slice(&column[skip..]);
        }
        true
    }
}

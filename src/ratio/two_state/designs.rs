//! The per-resample designs of a fixed-gap two-state fit ([`super::fixed`]), computed once
//! per channel and shared by the real and imaginary fits and by the fit without the smallest
//! separation; a [`DesignMemo`] also keeps them for the next channel with the same momenta and
//! points (channels are ordered by sink momentum and momentum transfer, so the currents and
//! projectors of one momentum pair follow each other).

use crate::data::Momentum;
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
    pub(super) fn get(&self, k: usize) -> Option<&[f64]> {
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

/// The designs of the last channel fitted, kept for the next one when it has the same source
/// and sink momenta, the same `(tsep, tau)` points and the same symmetry: a design row depends
/// on nothing else (its `(tsep, tau)` and the two-point gaps and amplitude ratios at the two
/// momenta, per resample), so the kept designs are the ones that channel would compute, bit
/// for bit. One memo serves one map of two-point states, the one it was made for (a fit with
/// another map computes its own designs); it cannot outlive that map.
pub struct DesignMemo<'s, T> {
    /// The map of two-point states this memo serves.
    states: &'s T,
    last: Option<(DesignKey, DesignCache)>,
}

/// What a channel's designs depend on besides the two-point states.
#[derive(PartialEq)]
pub(super) struct DesignKey {
    /// Source momentum.
    pub source: Momentum,
    /// Sink momentum.
    pub sink: Momentum,
    /// Whether `c_i = c_f` is enforced (three columns instead of four).
    pub symmetric: bool,
    /// The fitted `(tsep, tau)` points, in order.
    pub points: Vec<(u32, u32)>,
}

impl<'s, T> DesignMemo<'s, T> {
    /// An empty memo for fits with the two-point parameters of `states`.
    pub fn new(states: &'s T) -> Self {
        DesignMemo { states, last: None }
    }

    /// The designs of a channel with `key`, fitted with `states`: the kept ones when the last
    /// channel had the same key and states, else `compute()`d and kept.
    pub(super) fn designs(
        &mut self,
        states: &T,
        key: DesignKey,
        compute: impl FnOnce() -> DesignCache,
    ) -> &DesignCache {
        let same_states = std::ptr::eq(states, self.states);
        let kept = same_states && self.last.as_ref().is_some_and(|(k, _)| *k == key);
        if !kept {
            self.last = None;
        }
        &self.last.get_or_insert_with(|| (key, compute())).1
    }
}

//! The per-resample designs of a fixed-gap two-state fit ([`super::fixed`]), computed once
//! per channel and shared by the real and imaginary fits and by the fit without the smallest
//! separation; a [`DesignMemo`] also keeps them for the next channel with the same momenta and
//! points (channels are ordered by sink momentum and momentum transfer, so the currents and
//! projectors of one momentum pair follow each other).

use super::fixed::Setup;
use super::TwoPointStates;
use crate::data::Momentum;
use nalgebra::DMatrix;
use std::collections::BTreeMap;

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

/// The designs of the last channel fitted, kept for the next one when it has the same source
/// and sink momenta, the same `(tsep, tau)` points and the same symmetry: a design row depends
/// on nothing else (its `(tsep, tau)` and the two-point gaps and amplitude ratios at the two
/// momenta, per resample), so the kept designs are the ones that channel would compute, bit
/// for bit. One memo serves one map of two-point states (a fit with another map computes its
/// own designs).
pub struct DesignMemo<'s> {
    states: &'s BTreeMap<Momentum, TwoPointStates>,
    last: Option<(MemoKey, DesignCache)>,
}

/// What a channel's designs depend on besides the two-point states.
#[derive(PartialEq)]
struct MemoKey {
    source: Momentum,
    sink: Momentum,
    symmetric: bool,
    points: Vec<(u32, u32)>,
}

impl<'s> DesignMemo<'s> {
    /// An empty memo for fits with the two-point parameters of `states`.
    pub fn new(states: &'s BTreeMap<Momentum, TwoPointStates>) -> Self {
        DesignMemo { states, last: None }
    }

    /// The designs of `setup` (a channel with these `source` and `sink` momenta, fitted with
    /// `states`): the kept ones when the last channel had the same key, else computed and kept.
    pub(super) fn designs(
        &mut self,
        setup: &Setup<'_>,
        states: &BTreeMap<Momentum, TwoPointStates>,
        source: Momentum,
        sink: Momentum,
    ) -> &DesignCache {
        let key = MemoKey {
            source,
            sink,
            symmetric: setup.symmetric,
            points: setup.points.iter().map(|p| (p.tsep, p.tau)).collect(),
        };
        let same_states = std::ptr::eq(self.states, states);
        let kept = same_states && self.last.as_ref().is_some_and(|(k, _)| *k == key);
        if !kept {
            self.last = None;
        }
        &self.last.get_or_insert_with(|| (key, setup.designs())).1
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::ratio::{RatioPoint, ReIm};
    use crate::resample::{Resampled, Scheme};

    fn resampled(central: f64, step: f64) -> Resampled {
        let samples = (0..5).map(|k| central + step * k as f64).collect();
        Resampled::new(central, samples, Scheme::Jackknife)
    }

    fn states(gap: f64) -> TwoPointStates {
        TwoPointStates {
            energy: resampled(0.5, 0.001),
            amp_ratio: resampled(0.8, 0.01),
            gap: resampled(gap, 0.002),
        }
    }

    fn point(tsep: u32, tau: u32) -> RatioPoint {
        let v = resampled(1.0, 0.0);
        RatioPoint::new(
            tsep,
            tau,
            ReIm {
                re: v.clone(),
                im: v,
            },
        )
    }

    // The memo's designs are the channel's own (the definition of the cache), kept while the
    // key stays the same and recomputed when the momenta or the points change.
    #[test]
    fn memo_keeps_designs_for_the_same_key_only() {
        let (p0, p1) = ([0, 0, 0], [1, 0, 0]);
        let map: BTreeMap<Momentum, TwoPointStates> = [(p0, states(0.3)), (p1, states(0.45))]
            .into_iter()
            .collect();
        let points: Vec<RatioPoint> = [(8, 2), (8, 6), (10, 3), (10, 5), (12, 4)]
            .iter()
            .map(|&(t, tau)| point(t, tau))
            .collect();
        let setup = |source: Momentum, n: usize| Setup {
            points: points[..n].iter().collect(),
            tseps: vec![8, 10, 12],
            source: &map[&source],
            sink: &map[&p0],
            symmetric: false,
        };
        let own = |s: &Setup<'_>| s.designs().values;
        let mut memo = DesignMemo::new(&map);
        let first = memo.designs(&setup(p1, 5), &map, p1, p0).values.as_ptr();
        let again = memo.designs(&setup(p1, 5), &map, p1, p0);
        assert_eq!(again.values.as_ptr(), first, "same key: kept");
        assert_eq!(again.values, own(&setup(p1, 5)));
        let fewer = memo.designs(&setup(p1, 4), &map, p1, p0);
        assert_eq!(fewer.values, own(&setup(p1, 4)), "other points: recomputed");
        let other = memo.designs(&setup(p0, 4), &map, p0, p0);
        assert_eq!(
            other.values,
            own(&setup(p0, 4)),
            "other momentum: recomputed"
        );
        assert_ne!(own(&setup(p0, 4)), own(&setup(p1, 4)));
        // A memo made for another map of states never hands out its designs.
        let copy = map.clone();
        let foreign = memo.designs(&setup(p0, 4), &copy, p0, p0).values.clone();
        assert_eq!(foreign, own(&setup(p0, 4)));
    }
}

//! Several stable means at once: the two-pass mean of [`stable_mean`] for a group of equally
//! long slices (the time series of a table), bit for bit, with the slices' additions
//! interleaved. One slice's sum is a chain of dependent additions that waits on the adder's
//! latency at every value; summing several slices side by side overlaps those chains, so the
//! autocorrelation measurement and the inflation, which average every time series of the
//! data, take a fraction of the time without changing any bit.

use super::value::stable_mean;

/// [`stable_mean`] of [`MEANS_AT_ONCE`] slices, bit for bit: each slice's sums add its values
/// in its own order from `-0.0` (as `Iterator::sum` does), but the slices' additions are
/// interleaved, so the processor overlaps them instead of waiting for one long chain of
/// dependent additions. Slices of unequal length are averaged one by one.
pub(crate) fn stable_means(xs: [&[f64]; MEANS_AT_ONCE]) -> [f64; MEANS_AT_ONCE] {
    let len = xs[0].len();
    if xs.iter().any(|x| x.len() != len) {
        return xs.map(stable_mean);
    }
    let n = len as f64;
    let mut sums = [-0.0f64; MEANS_AT_ONCE];
    for i in 0..len {
        for (s, x) in sums.iter_mut().zip(&xs) {
            *s += x[i];
        }
    }
    let means = sums.map(|s| s / n);
    let mut residuals = [-0.0f64; MEANS_AT_ONCE];
    for i in 0..len {
        for ((r, x), m) in residuals.iter_mut().zip(&xs).zip(&means) {
            *r += x[i] - m;
        }
    }
    let mut out = [0.0; MEANS_AT_ONCE];
    for ((o, m), r) in out.iter_mut().zip(means).zip(residuals) {
        *o = m + r / n;
    }
    out
}

/// [`stable_mean`] of every slice of `group` (at most [`MEANS_AT_ONCE`] of them), together by
/// [`stable_means`] when there are that many, else one by one: the same bits either way.
pub(crate) fn stable_means_of<S: AsRef<[f64]>>(group: &[S]) -> Vec<f64> {
    match group {
        [a, b, c, d] => stable_means([a.as_ref(), b.as_ref(), c.as_ref(), d.as_ref()]).to_vec(),
        _ => group.iter().map(|s| stable_mean(s.as_ref())).collect(),
    }
}

/// Slices averaged together by [`stable_means`].
pub(crate) const MEANS_AT_ONCE: usize = 4;

//! Returning freed memory to the system between stages.
//!
//! Why it exists: glibc's allocator keeps memory a program frees inside its heaps (one per
//! thread that allocated, with `--jobs 2` several), where only later allocations from the same
//! heap reuse it. The read's buffers and the spectrum fits' temporaries are freed before the
//! next stage allocates elsewhere, so without this the run's resident memory counts them on
//! top of the data (production mock, 1000 configurations, `--jobs 2`: measured in
//! DEVELOPERS.md § Performance). `malloc_trim(0)` hands every wholly free page of every heap
//! back; it changes no value the program computes.
//!
//! Also here: the check that a run's resampled data fit in memory before it starts.

use super::plan::Plan;
use super::spec::ResamplingMethod;
use crate::budget::product;
use crate::data::{ThreePointData, TwoPointData};
use crate::ratio::ChannelKey;
use crate::Result;
use std::collections::BTreeMap;

/// Give the free pages of every allocator heap back to the system (glibc only; a no-op
/// elsewhere).
pub(super) fn release_free_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: malloc_trim only inspects the allocator's own free lists; it has no
    // preconditions and may be called from any thread at any time.
    unsafe {
        libc::malloc_trim(0);
    }
}

/// Refuse settings whose resampled data would not fit in memory (`budget::check`, whose
/// estimates are lower bounds of the real use): see [`resampled_points`] for what is counted,
/// plus the resample plan (one weight per resample and bin).
pub(super) fn check_memory(plan: &Plan, two: &TwoPointData, three: &ThreePointData) -> Result<()> {
    let r = &plan.spec.resampling;
    let n_bins = (two.configs.len() / r.bin_size.max(1)) as u64;
    let (n_samples, key) = match r.method {
        ResamplingMethod::Jackknife => (n_bins, "resampling.bin_size"),
        ResamplingMethod::Bootstrap => (r.samples as u64, "resampling.samples"),
    };
    let points = resampled_points(two, three, rayon::current_num_threads());
    let bytes =
        product(&[n_samples, points, 2, 8]).saturating_add(product(&[n_samples, n_bins, 8]));
    crate::budget::check(
        &format!("{n_samples} resamples of {points} data points held at once"),
        bytes,
    )
    .map_err(|m| plan.error(key, m))
}

/// The data points whose resampled real and imaginary parts a run holds at once: every
/// two-point time slice (the ratios divide by their resampled means), and the three-point
/// points of as many channels as run in parallel (`threads`), the largest channels counted,
/// since the ratio stage builds, fits and summarises one channel at a time per thread
/// (`ratio::analyse_all_consuming`). A channel is one momentum / current / projector over all
/// its separations.
fn resampled_points(two: &TwoPointData, three: &ThreePointData, threads: usize) -> u64 {
    let two_point: u64 = two.channels.values().map(|s| s.n_t as u64).sum();
    let mut per_channel: BTreeMap<ChannelKey, u64> = BTreeMap::new();
    for (key, s) in &three.channels {
        *per_channel.entry(ChannelKey::of(key)).or_default() += s.n_t as u64;
    }
    let mut sizes: Vec<u64> = per_channel.into_values().collect();
    sizes.sort_unstable_by(|a, b| b.cmp(a));
    two_point + sizes.iter().take(threads.max(1)).sum::<u64>()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{Current, Projector, Series, ThreePointKey, TwoPointKey};

    fn key(q: i32, tsep: u32) -> ThreePointKey {
        ThreePointKey {
            tsep,
            pf: [0, 0, 0],
            q: [0, 0, q],
            current: Current::V4,
            projector: Projector::Unpol,
            flavor: None,
            diagram: None,
            ops: None,
        }
    }

    #[test]
    fn counts_the_largest_channels_in_flight_not_every_channel() {
        let mut two = TwoPointData::default();
        let rest = TwoPointKey {
            momentum: [0, 0, 0],
            smear: None,
            ops: None,
        };
        two.channels.insert(rest, Series::zeros(48, 4));
        let mut three = ThreePointData::default();
        // channel q=1 at tsep 8 and 10 (9 + 11 points), channel q=2 at tsep 8 (9 points)
        for (q, tsep) in [(1, 8), (1, 10), (2, 8)] {
            three
                .channels
                .insert(key(q, tsep), Series::zeros(tsep as usize + 1, 4));
        }
        assert_eq!(resampled_points(&two, &three, 1), 48 + 20);
        assert_eq!(resampled_points(&two, &three, 2), 48 + 20 + 9);
        assert_eq!(resampled_points(&two, &three, 8), 48 + 29);
        assert_eq!(resampled_points(&two, &three, 0), 48 + 20);
    }
}

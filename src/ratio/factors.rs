//! The two-point factor of the ratio (docs/methods.md §3),
//! `sqrt(|C2_i(tsep - tau) C2_f(tau) C2_f(tsep) / (C2_f(tsep - tau) C2_i(tau) C2_i(tsep))|) / C2_f(tsep)`,
//! per resample: it depends on the two momenta and `(tsep, tau)` only, so every channel with the
//! same source and sink momenta (other currents, projectors, components) shares one copy,
//! computed by the first channel that needs it ([`Factors`]). The values are those each channel
//! computed for itself before (the same operations), whichever thread computes them first.

use crate::data::Momentum;
use crate::resample::Resampled;
use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

/// The factor at one `tau` with what the negative-root policy needs.
#[derive(Debug)]
pub(super) struct PointFactor {
    /// Resamples (central value included) whose product under the root is negative.
    pub negatives: usize,
    /// Whether the central product is negative.
    pub central_negative: bool,
    /// The factor `sqrt(|product|) / C2_f(tsep)`.
    pub factor: Resampled,
}

/// The factors of one `(p_i, p_f, tsep)`, one per `tau = 0..=tsep`, once computed.
type Row = Arc<OnceLock<Arc<[PointFactor]>>>;

/// The factors of every `(p_i, p_f, tsep)` a stage has met, shared between its threads.
#[derive(Default)]
pub(super) struct Factors {
    rows: Mutex<HashMap<(Momentum, Momentum, u32), Row>>,
}

impl Factors {
    /// The factors at `tau = 0..=tsep` for two-point means `c2i` (source momentum `pi`) and
    /// `c2f` (sink momentum `pf`), computed on first use. The two-point means of a momentum
    /// are the same for every channel of a stage, so the momenta name them.
    pub fn get(
        &self,
        (pi, pf): (Momentum, Momentum),
        tsep: u32,
        c2i: &[Resampled],
        c2f: &[Resampled],
    ) -> Arc<[PointFactor]> {
        let row = {
            // A poisoned lock only means another thread panicked while inserting: the map
            // itself is still whole.
            let mut rows = self.rows.lock().unwrap_or_else(|e| e.into_inner());
            rows.entry((pi, pf, tsep)).or_default().clone()
        };
        row.get_or_init(|| compute(tsep, c2i, c2f).into()).clone()
    }
}

/// The factors at every `tau = 0..=tsep` (the caller has checked that `c2i` and `c2f` reach
/// `tsep`).
fn compute(tsep: u32, c2i: &[Resampled], c2f: &[Resampled]) -> Vec<PointFactor> {
    let ts = tsep as usize;
    (0..=ts)
        .map(|t| {
            let product = Resampled::combine_array(
                [
                    &c2i[ts - t],
                    &c2f[t],
                    &c2f[ts],
                    &c2f[ts - t],
                    &c2i[t],
                    &c2i[ts],
                ],
                |x| (x[0] * x[1] * x[2]) / (x[3] * x[4] * x[5]),
            );
            let negatives = usize::from(product.central < 0.0)
                + product.samples.iter().filter(|&&x| x < 0.0).count();
            let factor =
                Resampled::combine_array([&product, &c2f[ts]], |x| x[0].abs().sqrt() / x[1]);
            PointFactor {
                negatives,
                central_negative: product.central < 0.0,
                factor,
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::resample::ResamplePlan;

    // Definition (docs/methods.md §3): the factor is
    // sqrt(|C2_i(tsep-tau) C2_f(tau) C2_f(tsep) / (C2_f(tsep-tau) C2_i(tau) C2_i(tsep))|) / C2_f(tsep)
    // per resample; one computation is shared by every request with the same momenta and tsep.
    #[test]
    fn factors_follow_the_definition_and_are_shared_per_momentum_pair() {
        let plan = ResamplePlan::jackknife(5);
        let series = |e: f64| -> Vec<Resampled> {
            (0..8)
                .map(|t| {
                    let bins: Vec<f64> = (0..5)
                        .map(|c| (-e * t as f64).exp() * (1.0 + 0.01 * c as f64))
                        .collect();
                    plan.mean(&bins)
                })
                .collect()
        };
        let (c2i, c2f) = (series(0.5), series(0.4));
        let (pi, pf) = ([1, 0, 0], [0, 0, 0]);
        let cache = Factors::default();
        let a = cache.get((pi, pf), 6, &c2i, &c2f);
        let b = cache.get((pi, pf), 6, &c2i, &c2f);
        assert!(Arc::ptr_eq(&a, &b));
        assert!(!Arc::ptr_eq(&a, &cache.get((pi, pf), 4, &c2i, &c2f)));
        let row = &a;
        assert_eq!(row.len(), 7);
        let (ts, t) = (6usize, 2usize);
        let want = |i: &[f64], f: &[f64]| {
            ((i[ts - t] * f[t] * f[ts]) / (f[ts - t] * i[t] * i[ts]))
                .abs()
                .sqrt()
                / f[ts]
        };
        let central = |v: &[Resampled]| v.iter().map(|r| r.central).collect::<Vec<_>>();
        let got = &row[t].factor;
        assert_eq!(
            got.central.to_bits(),
            want(&central(&c2i), &central(&c2f)).to_bits()
        );
        for s in 0..5 {
            let at = |v: &[Resampled]| v.iter().map(|r| r.samples[s]).collect::<Vec<_>>();
            assert_eq!(
                got.samples[s].to_bits(),
                want(&at(&c2i), &at(&c2f)).to_bits()
            );
        }
        assert_eq!(row[t].negatives, 0);
    }
}

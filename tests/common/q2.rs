//! Data for the Q² fit tests: seeded Gaussian noise and jackknife points of a known curve.

use formfactory::fit::Weighting;
use formfactory::q2::{Q2FitSettings, Q2Model, Q2Point};
use formfactory::resample::{ResamplePlan, Resampled, Scheme};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Box–Muller standard normal from a seeded stream.
pub fn normal(rng: &mut impl Rng) -> f64 {
    let u1: f64 = rng.gen_range(f64::EPSILON..1.0);
    let u2: f64 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

/// Settings of a fit of `model` with diagonal weights and the default solver.
pub fn settings(model: Q2Model) -> Q2FitSettings {
    Q2FitSettings {
        model,
        weights: Weighting::Diagonal,
        q2_max: None,
        solver: Default::default(),
    }
}

/// Points of `f` at `q2s` with per-configuration Gaussian noise (relative size `rel`),
/// jackknife-resampled over `n_cfg` configurations.
pub fn noisy_points(
    q2s: &[f64],
    f: impl Fn(f64) -> f64,
    rel: f64,
    n_cfg: usize,
    seed: u64,
) -> Vec<Q2Point> {
    let plan = ResamplePlan::jackknife(n_cfg);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    q2s.iter()
        .map(|&q2| {
            let v = f(q2);
            let x: Vec<f64> = (0..n_cfg)
                .map(|_| v * (1.0 + rel * normal(&mut rng)))
                .collect();
            Q2Point {
                q2: Resampled::constant(q2, n_cfg, Scheme::Jackknife),
                value: plan.mean(&x),
            }
        })
        .collect()
}

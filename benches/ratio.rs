//! The ratio stage on a synthetic ensemble: 250 configurations (jackknife), 24 channels
//! (sink at rest, 12 injected momenta, V4 and V1), tsep 8..16 in steps of 2, tau_cut 2, full
//! covariance; every channel gets plateau, summation and fixed-gap two-state fits, as in a
//! production run. Throughput is reported in channels.
//!
//! Data: `C2(t; p) = A e^{-E t} (1 + a e^{-Delta t})` with `E = sqrt(m^2 + p^2)`, and a
//! three-point function whose ratio is a constant plus source- and sink-side excited-state
//! terms, times 1% multiplicative Gaussian noise per configuration (seeded ChaCha8).

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use formfactory::data::{
    Current, Momentum, Projector, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use formfactory::ratio::{analyse_all, RatioSettings, TwoPointStates};
use formfactory::resample::{ResamplePlan, Resampled};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;
use std::hint::black_box;

const N_CFG: usize = 250;
const TSEPS: [u32; 5] = [8, 10, 12, 14, 16];
const MASS: f64 = 0.48;
const GAP: f64 = 0.3;
const AMP_RATIO: f64 = 0.8;

fn energy(p: Momentum) -> f64 {
    let k = 2.0 * std::f64::consts::PI / 32.0;
    let p2: f64 = p.iter().map(|&n| (k * n as f64).powi(2)).sum();
    (MASS * MASS + p2).sqrt()
}

fn c2(p: Momentum, t: f64) -> f64 {
    (-energy(p) * t).exp() * (1.0 + AMP_RATIO * (-GAP * t).exp())
}

struct Ensemble {
    c2: TwoPointData,
    c3: ThreePointData,
    states: BTreeMap<Momentum, TwoPointStates>,
    plan: ResamplePlan,
}

fn ensemble() -> Ensemble {
    let mut rng = ChaCha8Rng::seed_from_u64(14);
    let mut noise = move || 1.0 + 0.01 * (rng.gen::<f64>() - 0.5) * 3.46;
    let qs: Vec<Momentum> = (0..12)
        .map(|i| [i % 3 - 1, (i / 3) % 2, (i / 6) % 2])
        .collect();
    let configs: Vec<i64> = (0..N_CFG as i64).collect();
    let mut c2_data = TwoPointData {
        configs: configs.clone(),
        ..Default::default()
    };
    let mut momenta: Vec<Momentum> = qs.iter().map(|q| [-q[0], -q[1], -q[2]]).collect();
    momenta.push([0, 0, 0]);
    momenta.sort();
    momenta.dedup();
    let n_t = 24;
    for &p in &momenta {
        let mut s = Series::zeros(n_t, N_CFG);
        for t in 0..n_t {
            for c in 0..N_CFG {
                s.re[t * N_CFG + c] = c2(p, t as f64) * noise();
            }
        }
        c2_data.channels.insert(
            TwoPointKey {
                momentum: p,
                smear: None,
                ops: None,
            },
            s,
        );
    }
    let mut c3 = ThreePointData {
        configs,
        ..Default::default()
    };
    for &q in &qs {
        let pi = [-q[0], -q[1], -q[2]];
        for current in [Current::V4, Current::V1] {
            for &tsep in &TSEPS {
                let n_tau = tsep as usize + 1;
                let mut s = Series::zeros(n_tau, N_CFG);
                for tau in 0..n_tau {
                    let (ts, ta) = (tsep as f64, tau as f64);
                    let excited = 1.0 - 0.2 * (-GAP * ta).exp() - 0.2 * (-GAP * (ts - ta)).exp();
                    let base = 0.9
                        * excited
                        * (c2(pi, ta) * c2([0, 0, 0], ts - ta)).sqrt()
                        * (c2([0, 0, 0], ts) * c2(pi, ts)).sqrt()
                        / (c2(pi, ts) * c2([0, 0, 0], ts)).sqrt();
                    for c in 0..N_CFG {
                        s.re[tau * N_CFG + c] = base * noise();
                    }
                }
                let key = ThreePointKey {
                    tsep,
                    pf: [0, 0, 0],
                    q,
                    current,
                    projector: Projector::Unpol,
                    flavor: None,
                    diagram: None,
                    ops: None,
                };
                c3.channels.insert(key, s);
            }
        }
    }
    let plan = ResamplePlan::jackknife(N_CFG);
    let scheme = plan.scheme();
    let fixed = |v: f64, spread: f64, k: usize| {
        let samples = (0..N_CFG)
            .map(|j| v * (1.0 + spread * ((j * 7 + k) % 11) as f64 / 11.0))
            .collect();
        Resampled::new(v, samples, scheme)
    };
    let states = momenta
        .iter()
        .enumerate()
        .map(|(k, &p)| {
            (
                p,
                TwoPointStates {
                    energy: fixed(energy(p), 1e-3, k),
                    amp_ratio: fixed(AMP_RATIO, 1e-2, k),
                    gap: fixed(GAP, 1e-2, k),
                },
            )
        })
        .collect();
    Ensemble {
        c2: c2_data,
        c3,
        states,
        plan,
    }
}

fn ratio_stage(c: &mut Criterion) {
    let e = ensemble();
    let settings = RatioSettings {
        tau_cut: 2,
        covariance: Default::default(),
        ..RatioSettings::default()
    };
    let n_channels = e.c3.channels.len() / TSEPS.len();
    let mut group = c.benchmark_group("ratio");
    group.sample_size(10);
    group.throughput(Throughput::Elements(n_channels as u64));
    group.bench_function("all_methods_250_configs", |b| {
        b.iter(|| {
            let r = analyse_all(&e.c3, &e.c2, &e.plan, &e.states, &settings)
                .expect("the synthetic ensemble analyses");
            black_box(r)
        })
    });
    group.finish();
}

criterion_group!(benches, ratio_stage);
criterion_main!(benches);

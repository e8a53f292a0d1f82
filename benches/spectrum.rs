//! Benchmarks of the spectrum stage: fits per second for one 2-state fit to 15 points on one
//! core, and the whole stage for 10 momenta and 1000 jackknife samples (seeded synthetic data).

use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use formfactory::data::{Series, TwoPointData, TwoPointKey};
use formfactory::fit::{nonlinear, FitSettings, Model, Weights};
use formfactory::resample::ResamplePlan;
use formfactory::spectrum::model::{Form, TwoPointModel};
use formfactory::spectrum::{run, IntRange, SpectrumSettings};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;
use std::hint::black_box;

fn two_state_fit(c: &mut Criterion) {
    let model = TwoPointModel::new((3..18).map(|t| t as f64).collect(), 2, Form::Exponential);
    let truth = [0.5, (0.6f64).ln(), 2.0, 1.0];
    let mut y = vec![0.0; model.n_points()];
    model.eval(&truth, &mut y);
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let sig: Vec<f64> = y.iter().map(|v| 0.01 * v).collect();
    for (v, s) in y.iter_mut().zip(&sig) {
        *v += s * (rng.gen::<f64>() - 0.5);
    }
    let w = Weights::diagonal(&sig);
    let start = [0.45, (0.5f64).ln(), 1.8, 0.8];
    let settings = FitSettings::default();
    let mut g = c.benchmark_group("fit");
    g.throughput(Throughput::Elements(1));
    g.bench_function("two_state_15_points", |b| {
        b.iter(|| nonlinear::fit(&model, black_box(&y), &w, &[], &start, &settings))
    });
    // The tolerances the spectrum stage uses by default.
    let stage = SpectrumSettings::default().fit;
    g.bench_function("two_state_15_points_stage_tolerances", |b| {
        b.iter(|| nonlinear::fit(&model, black_box(&y), &w, &[], &start, &stage))
    });
    g.finish();
}

fn synthetic(n_cfg: usize, n_t: usize) -> TwoPointData {
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut channels = BTreeMap::new();
    let momenta = [
        [0, 0, 0],
        [1, 0, 0],
        [0, 1, 0],
        [0, 0, 1],
        [1, 1, 0],
        [1, 0, 1],
        [0, 1, 1],
        [1, 1, 1],
        [2, 0, 0],
        [0, 0, 2],
    ];
    for n in momenta {
        let p2 = (n[0] * n[0] + n[1] * n[1] + n[2] * n[2]) as f64
            * (2.0 * std::f64::consts::PI / 16.0f64).powi(2);
        let e0 = (0.25 + p2).sqrt();
        let mut s = Series::zeros(n_t, n_cfg);
        for cfg in 0..n_cfg {
            let mut eps = 0.0;
            for t in 0..n_t {
                let tf = t as f64;
                let z: f64 = (0..12).map(|_| rng.gen::<f64>()).sum::<f64>() - 6.0;
                eps = 0.7 * eps + 0.51f64.sqrt() * z;
                let c = 2.0 * (-e0 * tf).exp() * (1.0 + 0.5 * (-0.6 * tf).exp());
                let i = s.index(t, cfg);
                s.re[i] = c * (1.0 + 0.01 * (0.08 * tf).exp() * eps);
            }
        }
        channels.insert(
            TwoPointKey {
                momentum: n,
                smear: None,
                ops: None,
            },
            s,
        );
    }
    TwoPointData {
        configs: (0..n_cfg as i64).collect(),
        channels,
    }
}

fn whole_stage(c: &mut Criterion) {
    let data = synthetic(1000, 24);
    let plan = ResamplePlan::jackknife(1000);
    let settings = SpectrumSettings {
        t_min: IntRange { from: 2, to: 6 },
        t_max: Some(16),
        n_states: IntRange { from: 1, to: 2 },
        l_extent: Some(16),
        ..SpectrumSettings::default()
    };
    let mut g = c.benchmark_group("stage");
    g.sample_size(10);
    for threads in [1, 2] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        g.bench_function(
            format!("10_momenta_1000_jackknife_{threads}_threads"),
            |b| b.iter(|| pool.install(|| run(black_box(&data), &plan, &settings).unwrap())),
        );
    }
    g.finish();
}

criterion_group!(benches, two_state_fit, whole_stage);
criterion_main!(benches);

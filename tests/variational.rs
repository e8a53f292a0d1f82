//! Integration tests: the variational method (GEVP). Checks: the analytic spectral
//! decomposition with exactly N states (Blossier et al., JHEP 04 (2009) 094), the pipeline
//! stage on seeded synthetic matrices with a known truth, the projection's algebra, and the
//! errors for bad input.

use approx::assert_relative_eq;
use formfactory::data::{Operators, Series, TwoPointData, TwoPointKey};
use formfactory::resample::{ResamplePlan, Resampled, Scheme};
use formfactory::spectrum::{gevp, GevpSettings, GevpSolutionKind, IntRange, SpectrumSettings};
use formfactory::variational;
use nalgebra::{DMatrix, DVector};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;

/// `C(t) = Z^T diag(e^{-E_n t}) Z` with `z[state][operator]`: exactly N states.
fn exact_matrix(z: &DMatrix<f64>, energies: &[f64], t: f64) -> DMatrix<f64> {
    let d = DMatrix::from_diagonal(&DVector::from_iterator(
        energies.len(),
        energies.iter().map(|e| (-e * t).exp()),
    ));
    z.transpose() * d * z
}

// Analytic (Blossier et al., JHEP 04 (2009) 094, eq. 2.6 with N states and N operators): the
// GEVP eigenvalues are exactly lambda_n(t, t0) = e^{-E_n (t - t0)} at every t, so
// -ln(lambda_n) / (t - t0) returns E_n to rounding; the fixed-vector correlators of the
// eigenvectors are the same exponentials, and v_m^T C(t) v_n = 0 for m != n.
#[test]
fn gevp_returns_known_energies_at_every_t() {
    let energies = [0.45, 0.8, 1.3];
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let z = DMatrix::from_fn(3, 3, |_, _| rng.gen_range(-1.0..1.0) + 0.2);
    let corr = |t: f64| exact_matrix(&z, &energies, t);
    let (t0, n_t) = (2usize, 16usize);
    for t in t0 + 1..n_t {
        let sol = gevp::solve(&corr(t as f64), &corr(t0 as f64)).unwrap();
        let dt = t as f64 - t0 as f64;
        for (n, e) in energies.iter().enumerate() {
            assert_relative_eq!(-sol.eigenvalues[n].ln() / dt, *e, epsilon = 1e-10);
        }
        let v = &sol.eigenvectors;
        let off = v.transpose() * corr(t as f64) * v;
        for m in 0..3 {
            for n in (0..3).filter(|&n| n != m) {
                let scale = (off[(m, m)] * off[(n, n)]).abs().sqrt();
                assert!(off[(m, n)].abs() < 1e-10 * scale, "t {t}: {off}");
            }
        }
    }
    // Resampled: samples are the exact matrix scaled per sample (a scale leaves lambda
    // unchanged), so every sample returns the same energies at every t, per-t and fixed.
    let matrix: Vec<Vec<Resampled>> = (0..9)
        .map(|ij| {
            (0..n_t)
                .map(|t| {
                    let v = corr(t as f64)[(ij / 3, ij % 3)];
                    let samples = (0..4).map(|s| v * (1.0 + 0.1 * s as f64)).collect();
                    Resampled::new(v, samples, Scheme::Jackknife)
                })
                .collect()
        })
        .collect();
    let pc = gevp::principal_correlators(&matrix, 3, t0, 4).unwrap();
    for t in (0..n_t).filter(|&t| t != t0) {
        let dt = t as f64 - t0 as f64;
        for (n, e) in energies.iter().enumerate() {
            for c in [&pc.lambda[n][t], &pc.fixed[n][t]] {
                assert_relative_eq!(-c.central.ln() / dt, *e, epsilon = 1e-10);
                for s in &c.samples {
                    assert_relative_eq!(-s.ln() / dt, *e, epsilon = 1e-10);
                }
            }
        }
    }
    // Not positive-definite C(t0): an error, not a panic.
    let err = gevp::solve(&corr(3.0), &DMatrix::zeros(3, 3)).unwrap_err();
    assert!(err.to_string().contains("not positive definite"), "{err}");
}

// Signs stay consistent across resamples and times: samples are the exact matrix scaled (a
// scale changes the vectors' length, not their direction), so every sample's components must
// carry the central signs at every t; and the exact-case vectors are the dual basis of the
// overlaps (analytic: v_n^T Z_m ∝ delta_nm).
#[test]
fn vectors_keep_order_and_sign_across_resamples() {
    let energies = [0.5, 0.9];
    let z = DMatrix::from_row_slice(2, 2, &[1.0, 0.7, 0.4, -0.9]);
    let n_t = 8;
    let matrix: Vec<Vec<Resampled>> = (0..4)
        .map(|ij| {
            (0..n_t)
                .map(|t| {
                    let v = exact_matrix(&z, &energies, t as f64)[(ij / 2, ij % 2)];
                    let samples = (0..5).map(|s| v * (1.0 + 0.01 * s as f64)).collect();
                    Resampled::new(v, samples, Scheme::Jackknife)
                })
                .collect()
        })
        .collect();
    let pc = gevp::principal_correlators(&matrix, 2, 1, 3).unwrap();
    for t in (0..n_t).filter(|&t| t != 1) {
        let v = pc.vectors[t].as_ref().unwrap();
        for (n, state) in v.iter().enumerate() {
            for (i, c) in state.iter().enumerate() {
                for s in &c.samples {
                    // Scaling C by a factor scales v by its inverse square root.
                    assert!(s.signum() == c.central.signum(), "t {t} state {n} comp {i}");
                }
            }
        }
    }
    // Exact case: the GEVP vectors are the dual basis of the overlaps, v_n ∝ (Z^-1)_{:, n}.
    let zinv = z.clone().try_inverse().unwrap();
    let v0: Vec<f64> = pc.vector_at_ref(0).iter().map(|x| x.central).collect();
    let ratio = v0[0] / zinv[(0, 0)];
    assert_relative_eq!(v0[1], ratio * zinv[(1, 0)], epsilon = 1e-10);
}

/// A seeded noisy 2x2 matrix at rest from two states, as operator-labelled channels.
fn noisy_matrix(seed: u64) -> (TwoPointData, [f64; 2]) {
    let energies = [0.5, 0.9];
    let z = [[1.0, 0.6], [0.5, -0.8]]; // z[operator][state]
    let (n_cfg, n_t) = (60, 20);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut channels = BTreeMap::new();
    // Per-element noise (symmetric pairs share it): a common part plus an own part.
    let mut noise = vec![vec![0.0; n_cfg * n_t]; 3];
    for cfg in 0..n_cfg {
        let mut eps = [0.0; 4];
        for t in 0..n_t {
            for e in eps.iter_mut() {
                let g: f64 = (0..12).map(|_| rng.gen::<f64>()).sum::<f64>() - 6.0;
                *e = 0.5 * *e + 0.75f64.sqrt() * g;
            }
            for pair in 0..3 {
                noise[pair][t * n_cfg + cfg] =
                    0.003 * (0.05 * t as f64).exp() * (eps[3] + 0.5 * eps[pair]);
            }
        }
    }
    let ops = ["g", "w"];
    for (i, a) in ops.iter().enumerate() {
        for (j, b) in ops.iter().enumerate() {
            let mut s = Series::zeros(n_t, n_cfg);
            for t in 0..n_t {
                let c: f64 = (0..2)
                    .map(|n| z[i][n] * z[j][n] * (-energies[n] * t as f64).exp())
                    .sum();
                for cfg in 0..n_cfg {
                    let k = s.index(t, cfg);
                    s.re[k] = c * (1.0 + noise[i + j][t * n_cfg + cfg]);
                }
            }
            let key = TwoPointKey {
                momentum: [0, 0, 0],
                smear: None,
                ops: Some(Operators::new(a, b)),
            };
            channels.insert(key, s);
        }
    }
    let data = TwoPointData {
        configs: (0..n_cfg as i64).collect(),
        channels,
    };
    (data, energies)
}

fn gevp_settings(kind: GevpSolutionKind) -> SpectrumSettings {
    SpectrumSettings {
        t_min: IntRange { from: 3, to: 5 },
        t_max: Some(12),
        n_states: IntRange { from: 1, to: 1 },
        gevp: Some(GevpSettings {
            t0: 2,
            t_ref: 4,
            energies_from: kind,
            compare_operator: None,
        }),
        ..SpectrumSettings::default()
    }
}

// Closure (seeded synthetic matrix, known truth): the energies fitted to both states'
// correlators agree with the truth within 2 sigma, for the per-t and the fixed-vector
// solution; the stage reports vectors at every t but t0.
#[test]
fn stage_closure_both_solutions() {
    let (data, energies) = noisy_matrix(99);
    for kind in [GevpSolutionKind::PerT, GevpSolutionKind::Fixed] {
        let r =
            variational::run(&data, &ResamplePlan::jackknife(60), &gevp_settings(kind)).unwrap();
        assert_eq!(r.operators, vec!["g".to_string(), "w".to_string()]);
        let g = &r.per_momentum[&[0, 0, 0]];
        for (n, e) in energies.iter().enumerate() {
            let fit = g.energy(n).unwrap();
            println!(
                "{kind:?} state {n}: {:.5} +- {:.5} (truth {e})",
                fit.central,
                fit.error()
            );
            assert!(
                (fit.central - e).abs() < 2.0 * fit.error(),
                "state {n}: {fit:?}"
            );
        }
        assert!(g.correlators.vectors[2].is_none());
        assert!(g
            .correlators
            .vectors
            .iter()
            .enumerate()
            .all(|(t, v)| t == 2 || v.is_some()));
        assert!(g.effective_per_t[0][5].is_some());
    }
}

// A metric that is not positive definite stops with a clear error naming t0.
#[test]
fn metric_not_positive_definite_is_an_error() {
    let (mut data, _) = noisy_matrix(5);
    // Make the two operators identical: C(t0) becomes singular.
    let gg = data.channels[&TwoPointKey {
        momentum: [0, 0, 0],
        smear: None,
        ops: Some(Operators::new("g", "g")),
    }]
        .clone();
    for (k, s) in data.channels.iter_mut() {
        if k.ops.is_some() {
            *s = gg.clone();
        }
    }
    let err = variational::run(
        &data,
        &ResamplePlan::jackknife(60),
        &gevp_settings(GevpSolutionKind::PerT),
    )
    .unwrap_err()
    .to_string();
    assert!(err.contains("C(t0) is not positive definite"), "{err}");
}

// A missing matrix element is named.
#[test]
fn missing_element_is_named() {
    let (mut data, _) = noisy_matrix(5);
    data.channels.remove(&TwoPointKey {
        momentum: [0, 0, 0],
        smear: None,
        ops: Some(Operators::new("w", "g")),
    });
    let err = variational::run(
        &data,
        &ResamplePlan::jackknife(60),
        &gevp_settings(GevpSolutionKind::PerT),
    )
    .unwrap_err()
    .to_string();
    assert!(err.contains("sink_op `w`, source_op `g`"), "{err}");
}

//! Integration tests: the mock-ensemble generator (methods.md §8).
//!
//! The noise-free means are checked against the formulas written out by hand from the spec's
//! numbers (methods.md §2, §5 check values, §8); the noisy ensembles against the statistics of
//! their construction (Gaussian means, AR(1) autocorrelation, chosen correlation
//! coefficients); the command against byte-identical reruns and clear errors.

use crate::common::{fixture, formfactory, stderr, tempdir};
use approx::assert_relative_eq;
use formfactory::data::{Current, Momentum, Projector, Series, ThreePointKey, TwoPointKey};
use formfactory::mock::{generate, MockEnsemble, MockSpec, NoiseSpec, Truth};
use std::f64::consts::PI;

fn load(name: &str) -> MockSpec {
    let path = fixture(&format!("mock/{name}"));
    let text = std::fs::read_to_string(&path).expect("fixture exists");
    MockSpec::from_yaml(&text, name).expect("fixture spec is valid")
}

fn from_text(text: &str) -> MockSpec {
    MockSpec::from_yaml(text, "inline").expect("spec is valid")
}

fn fixture_text(name: &str) -> String {
    std::fs::read_to_string(fixture(&format!("mock/{name}"))).expect("fixture exists")
}

fn run(spec: &MockSpec) -> MockEnsemble {
    generate(spec).expect("generation succeeds")
}

fn c2(e: &MockEnsemble, p: Momentum) -> &Series {
    &e.twopt.channels[&TwoPointKey {
        momentum: p,
        smear: None,
        ops: None,
    }]
}

fn c3(
    e: &MockEnsemble,
    tsep: u32,
    pf: Momentum,
    q: Momentum,
    current: Current,
    projector: Projector,
) -> &Series {
    &e.threept.channels[&ThreePointKey {
        tsep,
        pf,
        q,
        current,
        projector,
        flavor: None,
        diagram: None,
        ops: None,
    }]
}

/// Mean over configurations of the real (or imaginary) part at time `t`.
fn mean(s: &Series, t: usize, imaginary: bool) -> f64 {
    let v = if imaginary { s.im_at(t) } else { s.re_at(t) };
    v.iter().sum::<f64>() / v.len() as f64
}

/// The ratio of methods.md §3 from the configuration means.
fn ratio(e: &MockEnsemble, key: &ThreePointKey, tau: usize) -> (f64, f64) {
    let tsep = key.tsep as usize;
    let (f, i) = (c2(e, key.pf), c2(e, key.source_momentum()));
    let c = |s: &Series, t: usize| mean(s, t, false);
    let s = &e.threept.channels[key];
    let factor = (c(i, tsep - tau) * c(f, tau) * c(f, tsep)
        / (c(f, tsep - tau) * c(i, tau) * c(i, tsep)))
    .sqrt()
        / c(f, tsep);
    (mean(s, tau, false) * factor, mean(s, tau, true) * factor)
}

// Continuum dispersion E^2 = m^2 + p^2 and lattice momentum 2 pi n / L (methods.md §1, §2).
fn energy(m: f64, n2: f64, l: f64) -> f64 {
    (m * m + n2 * (2.0 * PI / l).powi(2)).sqrt()
}

// Two-point means at hand-computed points (methods.md §2 model, §8 overlaps
// Z_n(p) = Z_n(0) e^{-|p|^2 w^2 / 4}, A_n = Z_n^2): two_state.yaml has m = 0.5, 0.9,
// Z(0) = 1.1, 0.8, w = 2, L = 12.
#[test]
fn twopt_means_equal_the_formula() {
    let e = run(&load("two_state.yaml"));
    let at_rest = 1.1f64.powi(2) * (-3.0 * 0.5f64).exp() + 0.8f64.powi(2) * (-3.0 * 0.9f64).exp();
    assert_relative_eq!(
        mean(c2(&e, [0, 0, 0]), 3, false),
        at_rest,
        max_relative = 1e-12
    );
    let p2 = (2.0 * PI / 12.0).powi(2);
    let fall = (-p2 * 4.0 / 4.0).exp();
    let moving = (1.1 * fall).powi(2) * (-7.0 * energy(0.5, 1.0, 12.0)).exp()
        + (0.8 * fall).powi(2) * (-7.0 * energy(0.9, 1.0, 12.0)).exp();
    assert_relative_eq!(
        mean(c2(&e, [0, 0, -1]), 7, false),
        moving,
        max_relative = 1e-12
    );
    assert_relative_eq!(mean(c2(&e, [0, 0, -1]), 7, true), 0.0);
}

// Three-point means at hand-computed points: sink at rest, q = (0,0,1), p_i = -q; the
// kinematic factors are the rest-frame check values of methods.md §5
// (Pi(Gamma_0, V_4) = sqrt((E+m)/(2E)) G_E, Pi(Gamma_1, V_2) = eps_213 q_3 G_M / N,
// Pi(Gamma_3, A_3) = (i/N)((E+m) G_A - q_3^2 G_P/(2m)), Pi(Gamma_3, A_4) = (q_3/N)(G_A + (m-E) G_P/(2m)),
// N = sqrt(2E(E+m))), the form factors the spec's dipole, z-expansion (Hill & Paz 2010) and
// pion pole, and the excited terms of methods.md §8 with the spec's transition strengths.
#[test]
fn threept_means_equal_the_formula() {
    let e = run(&load("two_state.yaml"));
    let (m0, m1, l) = (0.5f64, 0.9f64, 12.0);
    let q3 = 2.0 * PI / l;
    let fall = (-q3 * q3 * 4.0 / 4.0).exp();
    let (ei0, ei1) = (energy(m0, 1.0, l), energy(m1, 1.0, l));
    let (a0f, a1f) = (1.1f64.powi(2), 0.8f64.powi(2));
    let (a0i, a1i) = ((1.1 * fall).powi(2), (0.8 * fall).powi(2));
    let q2 = q3 * q3 - (m0 - ei0).powi(2);
    let dipole = |g0: f64| g0 / (1.0 + q2 / (0.45 * 0.45)).powi(2);
    let (ge, gm) = (dipole(1.0), dipole(4.7));
    let tcut = 0.5625f64;
    let z = ((tcut + q2).sqrt() - tcut.sqrt()) / ((tcut + q2).sqrt() + tcut.sqrt());
    let ga = 1.27 - 1.5 * z + 0.5 * z * z;
    let gp = 4.0 * m0 * m0 * ga / (q2 + 0.25 * 0.25);
    let n = (2.0 * ei0 * (ei0 + m0)).sqrt();
    // sum_{mn} r_mn sqrt(A_m(p_f) A_n(p_i)) e^{-E_m(p_f)(tsep - tau) - E_n(p_i) tau}
    let states = |r: [[f64; 2]; 2], tsep: f64, tau: f64| {
        let sink = [(a0f, m0), (a1f, m1)];
        let source = [(a0i, ei0), (a1i, ei1)];
        let mut s = 0.0;
        for (m, (af, ef)) in sink.iter().enumerate() {
            for (k, (ai, ei)) in source.iter().enumerate() {
                s += r[m][k] * (af * ai).sqrt() * (-ef * (tsep - tau) - ei * tau).exp();
            }
        }
        s
    };
    let vector_r = [[1.0, 0.3], [0.2, 0.5]];
    let axial_r = [[1.0, -0.25], [-0.25, 0.4]];
    let (pf, q) = ([0, 0, 0], [0, 0, 1]);

    let s = c3(&e, 10, pf, q, Current::V4, Projector::Unpol);
    let want = ((ei0 + m0) / (2.0 * ei0)).sqrt() * ge * states(vector_r, 10.0, 4.0);
    assert_relative_eq!(mean(s, 4, false), want, max_relative = 1e-10);
    assert_relative_eq!(mean(s, 4, true), 0.0, epsilon = 1e-15);

    let s = c3(&e, 6, pf, q, Current::V2, Projector::Pol(1));
    let want = -q3 * gm / n * states(vector_r, 6.0, 2.0);
    assert_relative_eq!(mean(s, 2, false), want, max_relative = 1e-10);

    let s = c3(&e, 6, pf, q, Current::A3, Projector::Pol(3));
    let want = ((ei0 + m0) * ga - q3 * q3 * gp / (2.0 * m0)) / n * states(axial_r, 6.0, 2.0);
    assert_relative_eq!(mean(s, 2, true), want, max_relative = 1e-10);
    assert_relative_eq!(mean(s, 2, false), 0.0, epsilon = 1e-15);

    let s = c3(&e, 20, pf, q, Current::A4, Projector::Pol(3));
    let want = q3 / n * (ga + (m0 - ei0) * gp / (2.0 * m0)) * states(axial_r, 20.0, 13.0);
    assert_relative_eq!(mean(s, 13, false), want, max_relative = 1e-10);

    // The truth file carries the same form factors and Q^2.
    let (tq2, tge) = e.truth.form_factor(pf, q, "GE").expect("GE at the point");
    assert_relative_eq!(tq2, q2, max_relative = 1e-12);
    assert_relative_eq!(tge, ge, max_relative = 1e-12);
    let (_, tgp) = e.truth.form_factor(pf, q, "GP").expect("GP at the point");
    assert_relative_eq!(tgp, gp, max_relative = 1e-12);
}

/// two_state.yaml reduced to its ground state.
fn single_state_text() -> String {
    let text = fixture_text("two_state.yaml");
    let start = text.find("transitions:").expect("has transitions");
    let end = text.find("channels:").expect("has channels");
    let text = format!("{}{}", &text[..start], &text[end..]);
    text.replace("    - {mass: 0.9, overlap: 0.8}\n", "")
}

// With one state the ratio of methods.md §3, computed here from the generated means, equals
// the true matrix element Pi exactly, at every tsep and tau and in the moving frame
// p_f = (0,0,1), q = (0,1,0) too (the overlaps and exponentials cancel identically).
#[test]
fn single_state_ratio_is_the_matrix_element() {
    let e = run(&from_text(&single_state_text()));
    let mut checked = 0;
    for key in e.threept.channels.keys() {
        let pi = e
            .truth
            .matrix_element(key.pf, key.q, key.current, key.projector)
            .expect("truth has every channel");
        for tau in 1..key.tsep as usize {
            let (re, im) = ratio(&e, key, tau);
            assert_relative_eq!(re, pi.re, epsilon = 1e-10, max_relative = 1e-9);
            assert_relative_eq!(im, pi.im, epsilon = 1e-10, max_relative = 1e-9);
            checked += 1;
        }
    }
    let moving = e
        .threept
        .channels
        .keys()
        .filter(|k| k.pf == [0, 0, 1])
        .count();
    assert!(moving >= 8, "moving-frame channels generated: {moving}");
    assert!(checked > 500);
}

// With an excited state the ratio of the generated means equals the exact two-state form of
// methods.md §4, R = [M + c_i e^{-D_i tau} + c_f e^{-D_f (tsep - tau)} + c_if e^{-D_i tau - D_f (tsep - tau)}] F2,
// with M = Pi, c = M b, b_i = r_01 sqrt(a_i), b_f = r_10 sqrt(a_f), b_if = r_11 sqrt(a_i a_f),
// a = A_1/A_0, D = E_1 - E_0 at each momentum (the spec's transition strengths r); and it
// approaches Pi as tsep grows, at rest and in a moving frame.
#[test]
fn two_state_ratio_follows_the_two_state_form() {
    let e = run(&load("two_state.yaml"));
    let (vector_r, axial_r) = ([0.3, 0.2, 0.5], [-0.25, -0.25, 0.4]);
    let mut checked = 0;
    for key in e.threept.channels.keys() {
        let pi = e
            .truth
            .matrix_element(key.pf, key.q, key.current, key.projector)
            .expect("truth has every channel");
        let gap = |p: Momentum| {
            let l = e.truth.levels(p).expect("spectrum at p");
            (
                l.amplitudes[1] / l.amplitudes[0],
                l.energies[1] - l.energies[0],
            )
        };
        let ((af, df), (ai, di)) = (gap(key.pf), gap(key.source_momentum()));
        let [r01, r10, r11] = if key.current.name().starts_with('V') {
            vector_r
        } else {
            axial_r
        };
        let (bi, bf, bif) = (r01 * ai.sqrt(), r10 * af.sqrt(), r11 * (ai * af).sqrt());
        let tsep = key.tsep as f64;
        for tau in 1..key.tsep as usize {
            let t = tau as f64;
            let f2 = 1.0 / (1.0 + af * (-df * tsep).exp())
                * ((1.0 + ai * (-di * (tsep - t)).exp())
                    * (1.0 + af * (-df * t).exp())
                    * (1.0 + af * (-df * tsep).exp())
                    / ((1.0 + af * (-df * (tsep - t)).exp())
                        * (1.0 + ai * (-di * t).exp())
                        * (1.0 + ai * (-di * tsep).exp())))
                .sqrt();
            let bracket = 1.0
                + bi * (-di * t).exp()
                + bf * (-df * (tsep - t)).exp()
                + bif * (-di * t - df * (tsep - t)).exp();
            let (re, im) = ratio(&e, key, tau);
            assert_relative_eq!(
                re,
                pi.re * bracket * f2,
                epsilon = 1e-12,
                max_relative = 1e-9
            );
            assert_relative_eq!(
                im,
                pi.im * bracket * f2,
                epsilon = 1e-12,
                max_relative = 1e-9
            );
            checked += 1;
        }
    }
    assert!(checked > 500);
    for (pf, q) in [([0, 0, 0], [0, 0, 1]), ([0, 0, 1], [0, 1, 0])] {
        let pi = e
            .truth
            .matrix_element(pf, q, Current::V4, Projector::Unpol)
            .expect("channel generated");
        let key = |tsep| c3_key(tsep, pf, q, Current::V4, Projector::Unpol);
        let early = (ratio(&e, &key(6), 3).0 - pi.re).abs();
        let late = (ratio(&e, &key(20), 10).0 - pi.re).abs();
        assert!(early > 5.0 * late, "early {early}, late {late}");
    }
}

// Current conservation (methods.md §8): `q_mu <m|V^mu|n> = (E_m - E_n) <m|V_4|n> = 0` at equal
// sink and source momenta, so at q = 0 the charge V_4 connects no two different states, and
// it counts the same charge in every state (r_nn = 1): the ratio above is then exactly the
// matrix element at every tau and tsep (analytic: the two-state form with b_i = b_f = 0 and
// b_if = a, F2 = 1 / (1 + a e^{-D tsep})), although the spec gives r_01 = 0.3, r_10 = 0.2,
// r_11 = 0.5. A spatial current at q = 0 is not constrained and keeps its tau dependence.
#[test]
fn charge_at_zero_momentum_transfer_connects_no_two_states() {
    let text = fixture_text("two_state.yaml").replace(
        "      - {pf: [0, 0, 1], q: [0, 1, 0]}\n",
        "      - {pf: [0, 0, 1], q: [0, 1, 0]}\n      - {pf: [0, 0, 1], q: [0, 0, 0]}\n",
    );
    let e = run(&from_text(&text));
    let (pf, q) = ([0, 0, 1], [0, 0, 0]);
    let pi = e
        .truth
        .matrix_element(pf, q, Current::V4, Projector::Unpol)
        .expect("charge channel generated");
    for tsep in [6u32, 10, 20] {
        let key = c3_key(tsep, pf, q, Current::V4, Projector::Unpol);
        for tau in 1..tsep as usize {
            assert_relative_eq!(ratio(&e, &key, tau).0, pi.re, max_relative = 1e-9);
        }
    }
    let spatial: Vec<&ThreePointKey> = e
        .threept
        .channels
        .keys()
        .filter(|k| k.q == q && k.tsep == 10 && k.current != Current::V4)
        .filter(|k| k.current.name().starts_with('V'))
        .collect();
    assert!(!spatial.is_empty(), "a spatial vector channel at q = 0");
    for key in spatial {
        let part = |tau| {
            let (re, im) = ratio(&e, key, tau);
            if re.abs() >= im.abs() {
                re
            } else {
                im
            }
        };
        let (early, middle) = (part(1), part(5));
        assert!(
            (early - middle).abs() > 1e-3 * middle.abs(),
            "{key:?} keeps its transitions: {early} vs {middle}"
        );
    }
}

fn c3_key(tsep: u32, pf: Momentum, q: Momentum, c: Current, p: Projector) -> ThreePointKey {
    ThreePointKey {
        tsep,
        pf,
        q,
        current: c,
        projector: p,
        flavor: None,
        diagram: None,
        ops: None,
    }
}

// Spin 0 (pion.yaml): periodic symmetric C2 = A (e^{-E t} + e^{-E (T - t)}) with the lattice
// dispersion sinh^2(E/2) = sinh^2(m/2) + sum sin^2(p_i/2) (methods.md §2), and
// Pi(V_4) = (E_f + E_i) F / (2 sqrt(E_f E_i)) (methods.md §5).
#[test]
fn pion_means_equal_the_formula() {
    let e = run(&load("pion.yaml"));
    let (m, l, t_ext) = (0.2f64, 16.0, 32.0);
    let p = 2.0 * PI / l;
    let e1 = 2.0
        * ((m / 2.0).sinh().powi(2) + (p / 2.0).sin().powi(2))
            .sqrt()
            .asinh();
    let a1 = (2.0 * (-p * p * 1.5f64.powi(2) / 4.0).exp()).powi(2);
    let want = a1 * ((-e1 * 5.0).exp() + (-e1 * (t_ext - 5.0)).exp());
    assert_relative_eq!(
        mean(c2(&e, [1, 0, 0]), 5, false),
        want,
        max_relative = 1e-12
    );

    let (pf, q) = ([1, 0, 0], [1, 0, 0]); // p_i = 0
    let q2 = p * p - (e1 - m).powi(2);
    let f = 1.0 / (1.0 + q2 / 0.25).powi(2);
    let pi = (e1 + m) * f / (2.0 * (e1 * m).sqrt());
    let truth = e
        .truth
        .matrix_element(pf, q, Current::V4, Projector::None)
        .expect("generated");
    assert_relative_eq!(truth.re, pi, max_relative = 1e-10);
    let s = c3(&e, 8, pf, q, Current::V4, Projector::None);
    let a0 = 4.0;
    let want = pi * (a1 * a0).sqrt() * (-e1 * 5.0 - m * 3.0).exp();
    assert_relative_eq!(mean(s, 3, false), want, max_relative = 1e-10);
    // Vanishing channels are left out: V2, V3 at q along x with both momenta along x.
    assert!(!e
        .threept
        .channels
        .contains_key(&c3_key(8, pf, q, Current::V2, Projector::None)));
}

// With the noise on, the means over 4000 configurations agree with the noise-free means within
// 4 standard errors; the error of an AR(1) chain's mean is inflated by sqrt(2 tau_int),
// tau_int = (1 + rho) / (2 (1 - rho)) (methods.md §7).
#[test]
fn noisy_means_converge_to_the_truth() {
    let spec = load("noisy.yaml");
    let e = run(&spec);
    let mut exact_spec = spec.clone();
    exact_spec.noise = NoiseSpec::default();
    let exact = run(&exact_spec);
    let rho = 0.5f64;
    let inflation = (2.0 * (1.0 + rho) / (2.0 * (1.0 - rho))).sqrt();
    let check = |noisy: &Series, clean: &Series, t: usize| {
        for imaginary in [false, true] {
            let v = if imaginary {
                noisy.im_at(t)
            } else {
                noisy.re_at(t)
            };
            let n = v.len() as f64;
            let m = v.iter().sum::<f64>() / n;
            let sd = (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
            let se = sd / n.sqrt() * inflation;
            let want = mean(clean, t, imaginary);
            assert!(sd > 0.0, "noise is on");
            assert!(
                (m - want).abs() < 4.0 * se,
                "t {t}: mean {m}, truth {want}, se {se}"
            );
        }
    };
    for p in [[0, 0, 0], [0, 0, -1]] {
        for t in 0..8 {
            check(c2(&e, p), c2(&exact, p), t);
        }
    }
    let key = c3_key(4, [0, 0, 0], [0, 0, 1], Current::V4, Projector::Unpol);
    for tau in 0..=4 {
        check(
            &e.threept.channels[&key],
            &exact.threept.channels[&key],
            tau,
        );
    }
}

fn correlation(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len() as f64;
    let (ma, mb) = (a.iter().sum::<f64>() / n, b.iter().sum::<f64>() / n);
    let cov: f64 = a.iter().zip(b).map(|(x, y)| (x - ma) * (y - mb)).sum();
    let va: f64 = a.iter().map(|x| (x - ma).powi(2)).sum();
    let vb: f64 = b.iter().map(|y| (y - mb).powi(2)).sum();
    cov / (va * vb).sqrt()
}

// The noise has the chosen structure (noisy.yaml): lag-1 autocorrelation in configuration
// order equals the AR(1) coefficient rho = 0.5; neighbouring time slices correlate by
// exp(-1/xi), xi = 2; C3 and the C2(tsep; p_f) dividing it correlate by the chosen 0.6.
// Standard errors of these sample correlations with 4000 autocorrelated samples are about
// 0.02; the tolerance is 0.06.
#[test]
fn noise_structure_matches_the_spec() {
    let e = run(&load("noisy.yaml"));
    let s = c2(&e, [0, 0, 0]);
    let series = s.re_at(2);
    let lag1 = correlation(&series[..series.len() - 1], &series[1..]);
    assert_relative_eq!(lag1, 0.5, epsilon = 0.06);
    assert_relative_eq!(
        correlation(s.re_at(2), s.re_at(3)),
        (-0.5f64).exp(),
        epsilon = 0.06
    );
    let key = c3_key(4, [0, 0, 0], [0, 0, 1], Current::V4, Projector::Unpol);
    let c3 = &e.threept.channels[&key];
    assert_relative_eq!(correlation(c3.re_at(2), s.re_at(4)), 0.6, epsilon = 0.06);
    assert!(correlation(c3.im_at(2), s.re_at(4)).abs() < 0.06);
}

// Results do not depend on the number of rayon threads (each channel has its own stream).
#[test]
fn thread_count_does_not_matter() {
    let mut spec = load("noisy.yaml");
    spec.ensemble.configs = 30;
    let with = |threads| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("a thread pool")
            .install(|| run(&spec))
    };
    assert_eq!(with(1), with(3));
}

fn small_noisy_spec(seed: u64) -> String {
    fixture_text("noisy.yaml")
        .replace("configs: 4000", "configs: 20")
        .replace("seed: 2024", &format!("seed: {seed}"))
}

fn bytes(dir: &std::path::Path) -> Vec<Vec<u8>> {
    ["twopt.csv", "threept.csv", "truth.yaml"]
        .iter()
        .map(|f| std::fs::read(dir.join(f)).expect("output written"))
        .collect()
}

// Same seed -> byte-identical files through the real command; another seed -> other data.
#[test]
fn same_seed_same_bytes() {
    let dir = tempdir();
    std::fs::write(dir.path().join("a.yaml"), small_noisy_spec(7)).expect("write spec");
    std::fs::write(dir.path().join("b.yaml"), small_noisy_spec(8)).expect("write spec");
    for (spec, out) in [("a.yaml", "one"), ("a.yaml", "two"), ("b.yaml", "three")] {
        let o = formfactory(dir.path(), &["mock", spec, "--out", out]);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    let (one, two, three) = (
        bytes(&dir.path().join("one")),
        bytes(&dir.path().join("two")),
        bytes(&dir.path().join("three")),
    );
    assert_eq!(one, two);
    assert_ne!(one[0], three[0]);
    assert_ne!(one[1], three[1]);
    // The truth file reads back into the same Truth that generation makes in memory.
    let truth = Truth::read(&dir.path().join("one/truth.yaml")).expect("truth reads back");
    assert_eq!(truth, run(&from_text(&small_noisy_spec(7))).truth);
}

/// Whether `err` contains `name:LINE:COLUMN:`.
fn has_line_and_column(err: &str, name: &str) -> bool {
    err.split(&format!("{name}:")).skip(1).any(|rest| {
        let mut parts = rest.splitn(3, ':');
        let mut number = || {
            parts
                .next()
                .is_some_and(|p| !p.is_empty() && p.bytes().all(|b| b.is_ascii_digit()))
        };
        number() && number()
    })
}

// Bad specs fail with the YAML location (or the dotted key) and what was expected; no panic.
#[test]
fn bad_specs_are_clear_errors() {
    let good = fixture_text("two_state.yaml");
    let cases = [
        (good.replace("seed: 11", "seed: 11\ncolour: red"), "unknown field `colour`", true),
        (good.replace("mass: 0.9,", "mass: -0.9,"), "expected a positive number", true),
        (
            good.replace(
                "    - {mass: 0.9, overlap: 0.8}\n",
                "    - {mass: 0.9, overlap: 0.8}\n    - {mass: 1.2, overlap: 0.8}\n    - {mass: 1.5, overlap: 0.8}\n",
            ),
            "expected 1 to 3 states",
            true,
        ),
        (good.replace("V1, V2,", "V1, V9,"), "unknown current `V9`", true),
        (good.replace("  GA: {model: z_expansion, t_cut: 0.5625, coefficients: [1.27, -1.5, 0.5]}\n", ""), "form_factors.GA", false),
        (good.replace("tseps: [6, 10, 20]", "tseps: [6, 30]"), "channels.tseps", false),
    ];
    let dir = tempdir();
    for (i, (text, expected, located)) in cases.iter().enumerate() {
        let name = format!("bad{i}.yaml");
        std::fs::write(dir.path().join(&name), text).expect("write spec");
        let o = formfactory(dir.path(), &["mock", &name, "--out", "out"]);
        let err = stderr(&o);
        assert!(!o.status.success(), "case {i} should fail");
        assert!(!err.contains("panicked"), "case {i}: {err}");
        assert!(err.contains(&name), "case {i} names the file: {err}");
        assert!(err.contains(expected), "case {i}: {err}");
        if *located {
            assert!(
                has_line_and_column(&err, &name),
                "case {i} has a location: {err}"
            );
        }
        assert!(!dir.path().join("out/twopt.csv").exists());
    }
}

// The spec itself is never overwritten, even when it sits where an output would go.
#[test]
fn input_is_never_overwritten() {
    let dir = tempdir();
    let text = fixture_text("pion.yaml");
    std::fs::write(dir.path().join("truth.yaml"), &text).expect("write spec");
    let o = formfactory(dir.path(), &["mock", "truth.yaml", "--out", "."]);
    assert!(!o.status.success());
    assert!(
        stderr(&o).contains("is the current directory"),
        "{}",
        stderr(&o)
    );
    assert_eq!(
        std::fs::read_to_string(dir.path().join("truth.yaml")).expect("kept"),
        text
    );
}

// The committed demo data are exactly what their committed specs generate, and the readers
// of data-format.md accept them (the writer round-trips floats bit for bit).
#[test]
fn demo_data_match_their_specs() {
    let root = crate::common::repo_root().join("demo-data");
    for name in ["nucleon", "pion", "meson-gevp"] {
        let spec_path = root.join(format!("{name}.mock.yaml"));
        let text = std::fs::read_to_string(&spec_path).expect("demo spec exists");
        let e = run(&MockSpec::from_yaml(&text, name).expect("demo spec is valid"));
        let dir = root.join(name);
        let twopt = formfactory::io::read_twopt(&dir.join("twopt.csv")).expect("reads");
        let threept = formfactory::io::read_threept(&dir.join("threept.csv")).expect("reads");
        assert!(
            twopt == e.twopt,
            "{name}: twopt.csv differs from its spec's output"
        );
        assert!(
            threept == e.threept,
            "{name}: threept.csv differs from its spec's output"
        );
        let truth = Truth::read(&dir.join("truth.yaml")).expect("truth reads");
        assert_eq!(truth, e.truth, "{name}: truth.yaml");
    }
}

// The noise grows as in methods.md §7: the two-point noise-to-signal at t = 7 over that at
// t = 0 is exp(7 g), g = E_0 - 3 m_pi / 2 = 0.6 - 0.45 at rest (noisy.yaml); the three-point
// noise is 0.1 e^{g_f (tsep - tau) + g_i tau} times the ground-state envelope. Sample standard
// deviations of 4000 AR(1) samples are good to about 2 %; the tolerance is 6 %.
#[test]
fn noise_grows_as_specified() {
    let e = run(&load("noisy.yaml"));
    let sd = |v: &[f64]| {
        let n = v.len() as f64;
        let m = v.iter().sum::<f64>() / n;
        (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
    };
    let s = c2(&e, [0, 0, 0]);
    let relative = |t: usize| sd(s.re_at(t)) / mean(s, t, false);
    assert_relative_eq!(relative(0), 0.05, max_relative = 0.06);
    assert_relative_eq!(
        relative(7) / relative(0),
        (7.0 * 0.15f64).exp(),
        max_relative = 0.06
    );

    let sink = e.truth.levels([0, 0, 0]).expect("sink levels");
    let source = e.truth.levels([0, 0, -1]).expect("source levels");
    let (ef, ei) = (sink.energies[0], source.energies[0]);
    let (gf, gi) = (ef - 0.45, ei - 0.45);
    let envelope =
        (sink.amplitudes[0] * source.amplitudes[0]).sqrt() * (-ef * 2.0 - ei * 2.0).exp();
    let want = 0.1 * (gf * 2.0 + gi * 2.0).exp() * envelope;
    let key = c3_key(4, [0, 0, 0], [0, 0, 1], Current::V4, Projector::Unpol);
    let c3 = &e.threept.channels[&key];
    assert_relative_eq!(sd(c3.re_at(2)), want, max_relative = 0.06);
    assert_relative_eq!(sd(c3.im_at(2)), want, max_relative = 0.06);
}

// Scalar and tensor currents through the forward check values of methods.md §5:
// Pi(Gamma_0, S) = g_S and Pi(Gamma_3, T_12) = g_T at p_f = p_i = 0.
#[test]
fn scalar_and_tensor_forward_values() {
    let text = fixture_text("two_state.yaml")
        .replace(
            "  GP: {model: pion_pole}\n",
            "  GP: {model: pion_pole}\n  GS: {model: dipole, value_at_zero: 1.1, mass: 0.6}\n  GT: {model: dipole, value_at_zero: 0.95, mass: 0.7}\n",
        )
        .replace(
            "  insertions:\n",
            "  insertions:\n    - {currents: [S, T12], projectors: [unpol, pol3]}\n",
        )
        .replace(
            "      - {pf: [0, 0, 0], q: [0, 0, 1]}\n",
            "      - {pf: [0, 0, 0], q: [0, 0, 0]}\n      - {pf: [0, 0, 0], q: [0, 0, 1]}\n",
        );
    let e = run(&from_text(&text));
    let at_rest = |c, p| {
        e.truth
            .matrix_element([0, 0, 0], [0, 0, 0], c, p)
            .expect("generated")
    };
    assert_relative_eq!(
        at_rest(Current::S, Projector::Unpol).re,
        1.1,
        max_relative = 1e-12
    );
    assert_relative_eq!(
        at_rest(Current::T12, Projector::Pol(3)).re,
        0.95,
        max_relative = 1e-12
    );
}

#[test]
fn twists_move_sink_and_source_momenta_and_must_agree_on_shared_momenta() {
    // tests/fixtures/twist/mock.yaml: sink twist (0, 0, -5.5) on L = 16, m = 0.48, continuum
    // dispersion. The sink (0,0,1) has p_z = (2 pi - 5.5) / 16 (lattice_momentum) and
    // E = sqrt(m² + p²); the source at rest stays untwisted.
    let text = std::fs::read_to_string(fixture("twist/mock.yaml")).expect("fixture exists");
    let e = run(&from_text(&text));
    let pz = (2.0 * PI - 5.5) / 16.0;
    let sink = e.truth.levels([0, 0, 1]).expect("sink levels");
    assert_relative_eq!(sink.p[2], pz, max_relative = 1e-14);
    assert_relative_eq!(
        sink.energies[0],
        (0.48_f64.powi(2) + pz * pz).sqrt(),
        max_relative = 1e-14
    );
    let rest = e.truth.levels([0, 0, 0]).expect("source levels");
    assert_eq!(rest.p, [0.0; 3]);
    assert_relative_eq!(rest.energies[0], 0.48, max_relative = 1e-14);
    // a momentum used as sink and as source cannot carry two twists in one two-point table
    let shared = text.replace(
        "      - {pf: [0, 0, 1], q: [0, 0, 1]}",
        "      - {pf: [0, 0, 1], q: [0, 0, 1]}\n      - {pf: [0, 0, 0], q: [0, 0, 0]}",
    );
    assert_ne!(shared, text);
    let err = generate(&from_text(&shared)).unwrap_err().to_string();
    assert!(
        err.contains("twist_sink") && err.contains("(0,0,0)"),
        "{err}"
    );
}

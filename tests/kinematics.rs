//! Integration tests: kinematics (methods.md §1, §5).

use approx::assert_abs_diff_eq;
use formfactory::data::{Current, Projector};
use formfactory::fit::Weighting;
use formfactory::kinematics::{
    coefficients, continuum_energy, lattice_dispersion_energy, lattice_momentum, q_squared,
    FormFactor, Hadron, OnShell,
};
use nalgebra::Complex;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const TOL: f64 = 1e-12;

fn c(re: f64, im: f64) -> Complex<f64> {
    Complex::new(re, im)
}

/// The coefficient of `ff` in the channel, zero when absent.
fn k_of(
    hadron: Hadron,
    proj: Projector,
    cur: Current,
    k: &OnShell,
    ff: FormFactor,
) -> Complex<f64> {
    coefficients(hadron, proj, cur, k)
        .into_iter()
        .find(|(f, _)| *f == ff)
        .map_or(c(0.0, 0.0), |(_, v)| v)
}

fn assert_c(got: Complex<f64>, want: Complex<f64>, what: &str) {
    assert!((got - want).norm() < TOL, "{what}: got {got}, want {want}");
}

/// Random sink-at-rest kinematics: `p_f = 0`, `p_i = -q`, continuum on-shell energies.
fn rest_frames(n: usize, seed: u64) -> Vec<(OnShell, [f64; 3])> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..n)
        .map(|_| {
            let mass = rng.gen_range(0.3..1.2);
            let q = [0; 3].map(|_: i32| rng.gen_range(-0.8..0.8));
            let pi = q.map(|x| -x);
            let k = OnShell {
                mass,
                pf: [0.0; 3],
                pi,
                ef: mass,
                ei: continuum_energy(mass, pi),
            };
            (k, q)
        })
        .collect()
}

const VEC: [Current; 3] = [Current::V1, Current::V2, Current::V3];
const AX: [Current; 3] = [Current::A1, Current::A2, Current::A3];

fn eps(j: usize, k: usize, l: usize) -> f64 {
    // Levi-Civita symbol on indices 0..3.
    ((j as i32 - k as i32) * (k as i32 - l as i32) * (l as i32 - j as i32)) as f64 / 2.0
}

// Check values of methods.md §5 ("Check values", sink at rest), N = sqrt(2E(E+m)).
#[test]
fn vector_check_values_sink_at_rest() {
    for (k, q) in rest_frames(25, 11) {
        let (m, e) = (k.mass, k.ei);
        let n = (2.0 * e * (e + m)).sqrt();
        let h = Hadron::Spin1Half;
        let p0 = Projector::Unpol;
        assert_c(
            k_of(h, p0, Current::V4, &k, FormFactor::GE),
            c(((e + m) / (2.0 * e)).sqrt(), 0.0),
            "G0 V4 GE",
        );
        assert_c(
            k_of(h, p0, Current::V4, &k, FormFactor::GM),
            c(0.0, 0.0),
            "G0 V4 GM",
        );
        for (j, &vj) in VEC.iter().enumerate() {
            assert_c(
                k_of(h, p0, vj, &k, FormFactor::GE),
                c(0.0, q[j] / n),
                "G0 Vj GE",
            );
            assert_c(k_of(h, p0, vj, &k, FormFactor::GM), c(0.0, 0.0), "G0 Vj GM");
            for kk in 0..3 {
                let pk = Projector::Pol(kk as u8 + 1);
                let want: f64 = (0..3).map(|l| eps(j, kk, l) * q[l]).sum::<f64>() / n;
                assert_c(
                    k_of(h, pk, vj, &k, FormFactor::GM),
                    c(want, 0.0),
                    "Gk Vj GM",
                );
                assert_c(k_of(h, pk, vj, &k, FormFactor::GE), c(0.0, 0.0), "Gk Vj GE");
            }
        }
    }
}

#[test]
fn axial_check_values_sink_at_rest() {
    for (k, q) in rest_frames(25, 12) {
        let (m, e) = (k.mass, k.ei);
        let n = (2.0 * e * (e + m)).sqrt();
        let h = Hadron::Spin1Half;
        for kk in 0..3 {
            let pk = Projector::Pol(kk as u8 + 1);
            for (j, &aj) in AX.iter().enumerate() {
                let delta = if j == kk { 1.0 } else { 0.0 };
                assert_c(
                    k_of(h, pk, aj, &k, FormFactor::GA),
                    c(0.0, (e + m) * delta / n),
                    "Gk Aj GA",
                );
                assert_c(
                    k_of(h, pk, aj, &k, FormFactor::GP),
                    c(0.0, -q[j] * q[kk] / (2.0 * m * n)),
                    "Gk Aj GP",
                );
            }
            assert_c(
                k_of(h, pk, Current::A4, &k, FormFactor::GA),
                c(q[kk] / n, 0.0),
                "Gk A4 GA",
            );
            assert_c(
                k_of(h, pk, Current::A4, &k, FormFactor::GP),
                c(q[kk] * (m - e) / (2.0 * m * n), 0.0),
                "Gk A4 GP",
            );
        }
    }
}

// Forward check values of methods.md §5: Pi(Gamma_k, A_k) = i g_A, Pi(Gamma_0, S) = g_S,
// Pi(Gamma_3, T_12) = g_T, for random masses with both hadrons at rest.
#[test]
fn forward_charges() {
    let mut rng = ChaCha8Rng::seed_from_u64(13);
    for _ in 0..25 {
        let m = rng.gen_range(0.3..1.2);
        let k = OnShell {
            mass: m,
            pf: [0.0; 3],
            pi: [0.0; 3],
            ef: m,
            ei: m,
        };
        let h = Hadron::Spin1Half;
        for (kk, &ak) in AX.iter().enumerate() {
            assert_c(
                k_of(h, Projector::Pol(kk as u8 + 1), ak, &k, FormFactor::GA),
                c(0.0, 1.0),
                "gA",
            );
        }
        assert_c(
            k_of(h, Projector::Unpol, Current::S, &k, FormFactor::GS),
            c(1.0, 0.0),
            "gS",
        );
        assert_c(
            k_of(h, Projector::Pol(3), Current::T12, &k, FormFactor::GT),
            c(1.0, 0.0),
            "gT",
        );
        assert_c(
            k_of(h, Projector::Unpol, Current::V4, &k, FormFactor::GE),
            c(1.0, 0.0),
            "gV",
        );
    }
}

// Spin 0, methods.md §5: Pi(V_4) = (E_f + E_i) F / (2 sqrt(E_f E_i)), in random frames.
#[test]
fn spin0_temporal_vector() {
    let mut rng = ChaCha8Rng::seed_from_u64(14);
    for _ in 0..25 {
        let m = rng.gen_range(0.1..0.8);
        let pf = [0; 3].map(|_: i32| rng.gen_range(-0.8..0.8));
        let pi = [0; 3].map(|_: i32| rng.gen_range(-0.8..0.8));
        let k = OnShell {
            mass: m,
            pf,
            pi,
            ef: continuum_energy(m, pf),
            ei: continuum_energy(m, pi),
        };
        let want = (k.ef + k.ei) / (2.0 * (k.ef * k.ei).sqrt());
        assert_c(
            k_of(
                Hadron::Spin0,
                Projector::None,
                Current::V4,
                &k,
                FormFactor::F,
            ),
            c(want, 0.0),
            "spin0 V4",
        );
        assert!(coefficients(Hadron::Spin0, Projector::Unpol, Current::V4, &k).is_empty());
        assert!(coefficients(Hadron::Spin0, Projector::None, Current::A4, &k).is_empty());
    }
}

// Q^2 = |p_f - p_i|^2 - (E_f - E_i)^2 equals q.q of the Euclidean q = P_f - P_i, P = (p, iE)
// (methods.md §5), and vanishes in the forward case.
#[test]
fn q_squared_is_euclidean_square() {
    let mut rng = ChaCha8Rng::seed_from_u64(15);
    for _ in 0..25 {
        let m = rng.gen_range(0.1..1.2);
        let pf = [0; 3].map(|_: i32| rng.gen_range(-1.0..1.0));
        let pi = [0; 3].map(|_: i32| rng.gen_range(-1.0..1.0));
        let k = OnShell {
            mass: m,
            pf,
            pi,
            ef: continuum_energy(m, pf),
            ei: continuum_energy(m, pi),
        };
        let q: Vec<Complex<f64>> = (0..3)
            .map(|i| c(pf[i] - pi[i], 0.0))
            .chain(std::iter::once(c(0.0, k.ef - k.ei)))
            .collect();
        let qq: Complex<f64> = q.iter().map(|x| x * x).sum();
        assert_abs_diff_eq!(q_squared(&k), qq.re, epsilon = 1e-12);
        assert_abs_diff_eq!(qq.im, 0.0, epsilon = 1e-12);
        assert!(q_squared(&k) >= 0.0, "space-like momentum transfer");
        let fwd = OnShell {
            pi: pf,
            ei: k.ef,
            ..k
        };
        assert_abs_diff_eq!(q_squared(&fwd), 0.0, epsilon = 1e-15);
    }
}

// Lattice momentum p = (2 pi n + theta)/L (methods.md §1) and the two dispersion relations:
// at p = 0 both give E = m; at small p the lattice form has kinetic mass sinh(m), i.e.
// E - m = p^2 / (2 sinh m) + O(p^4) (expansion of sinh^2(E/2), analytic).
#[test]
fn momenta_and_dispersion() {
    let p = lattice_momentum([1, -2, 0], 24, [0.0, 0.0, 0.3]);
    let tp = 2.0 * std::f64::consts::PI / 24.0;
    assert_abs_diff_eq!(p[0], tp, epsilon = 1e-15);
    assert_abs_diff_eq!(p[1], -2.0 * tp, epsilon = 1e-15);
    assert_abs_diff_eq!(p[2], 0.3 / 24.0, epsilon = 1e-15);
    assert_abs_diff_eq!(
        lattice_dispersion_energy(0.5, [0.0; 3]),
        0.5,
        epsilon = 1e-14
    );
    let small = [1e-3, 0.0, 0.0];
    let slope = (lattice_dispersion_energy(0.5, small) - 0.5) / 1e-6;
    assert_abs_diff_eq!(slope, 1.0 / (2.0 * 0.5f64.sinh()), epsilon = 1e-5);
    let slope = (continuum_energy(0.5, small) - 0.5) / 1e-6;
    assert_abs_diff_eq!(slope, 1.0, epsilon = 1e-5);
    // sinh^2(E/2) = sinh^2(m/2) + sum sin^2(p/2) holds exactly.
    let p = [0.4, -0.2, 0.7];
    let e = lattice_dispersion_energy(0.6, p);
    let rhs = (0.3f64).sinh().powi(2) + p.iter().map(|x| (x / 2.0).sin().powi(2)).sum::<f64>();
    assert_abs_diff_eq!((e / 2.0).sinh().powi(2), rhs, epsilon = 1e-13);
}

// hbar c against the CODATA 2022 table (tests/fixtures/kinematics/codata.csv, see README there):
// the printed value is truncated, so compare to 1e-10 relative.
#[test]
fn hbarc_matches_codata() {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/fixtures/kinematics/codata.csv"
    );
    let mut reader = csv::Reader::from_path(path).expect("fixture readable");
    let mev_fm: f64 = reader
        .records()
        .map(|r| r.expect("fixture row"))
        .find(|r| &r[0] == "reduced Planck constant times c in MeV fm")
        .expect("hbar c row present")[1]
        .parse()
        .expect("number");
    approx::assert_relative_eq!(
        formfactory::kinematics::HBARC_GEV_FM * 1000.0,
        mev_fm,
        max_relative = 1e-10
    );
    // Conversions: Q^2[GeV^2] = Q^2[lat] (hbar c / a)^2.
    let a = 0.09;
    approx::assert_relative_eq!(
        formfactory::kinematics::q2_to_gev2(0.1, a),
        0.1 * (mev_fm / 1000.0 / a).powi(2),
        max_relative = 1e-10
    );
}

#[test]
fn flavor_term_schema_lists_the_diagram_names() {
    // The YAML `diagram` of a flavour term accepts exactly the data-format.md labels.
    let schema = schemars::schema_for!(formfactory::data::flavor::FlavorTerm);
    let text = serde_json::to_string(&schema).unwrap();
    assert!(
        text.contains("\"connected\"") && text.contains("\"disconnected\""),
        "{text}"
    );
    let term: formfactory::data::flavor::FlavorTerm =
        serde_yaml_ng::from_str("{flavor: u, diagram: connected, weight: 1.0}").unwrap();
    assert_eq!(term.diagram, Some(formfactory::data::Diagram::Connected));
    assert!(
        serde_yaml_ng::from_str::<formfactory::data::flavor::FlavorTerm>(
            "{flavor: u, diagram: loop, weight: 1.0}"
        )
        .is_err()
    );
}

mod decomposition {
    use super::*;
    use formfactory::data::flavor::{combine, FlavorCombo};
    use formfactory::data::{Diagram, Momentum, Series, ThreePointData, ThreePointKey};
    use formfactory::kinematics::{
        decompose, ChannelValue, DecompositionSettings, Dispersion, Energies, KinematicSetup,
    };
    use formfactory::resample::{ResamplePlan, Resampled, Scheme};
    use rand_distr_free::normal;

    /// Box–Muller standard normal from a seeded ChaCha stream.
    mod rand_distr_free {
        use rand::Rng;
        pub fn normal(rng: &mut impl Rng) -> f64 {
            let u1: f64 = rng.gen_range(f64::EPSILON..1.0);
            let u2: f64 = rng.gen();
            (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
        }
    }

    const L: usize = 24;

    fn setup(mass: Resampled) -> KinematicSetup {
        KinematicSetup {
            hadron: Hadron::Spin1Half,
            l: L,
            twist_sink: [0.0; 3],
            twist_source: [0.0; 3],
            mass,
            energies: Energies::Dispersion(Dispersion::Continuum),
            spacing_fm: Some(0.09),
        }
    }

    fn all_momenta(max2: i32) -> Vec<Momentum> {
        let mut v = Vec::new();
        for x in -2..=2 {
            for y in -2..=2 {
                for z in -2..=2 {
                    if x * x + y * y + z * z <= max2 {
                        v.push([x, y, z]);
                    }
                }
            }
        }
        v
    }

    /// Synthetic form factor: dipole with per-sample pole mass `pole`.
    fn dipole(q2: f64, g0: f64, pole: f64) -> f64 {
        g0 / (1.0 + q2 / (pole * pole)).powi(2)
    }

    /// Exact ratio values: per sample, Pi = sum K G with G from per-sample dipoles in Q^2.
    fn exact_channels(
        st: &KinematicSetup,
        frames: &[(Momentum, Momentum)],
        currents: &[Current],
        truth: &dyn Fn(FormFactor, f64, Option<usize>) -> f64,
    ) -> Vec<ChannelValue> {
        let n = st.mass.len();
        let mut out = Vec::new();
        for &(pf, q) in frames {
            for &cur in currents {
                for proj in [
                    Projector::Unpol,
                    Projector::Pol(1),
                    Projector::Pol(2),
                    Projector::Pol(3),
                ] {
                    let value = |s: Option<usize>| -> Complex<f64> {
                        let k = st.on_shell(pf, q, s).expect("kinematics");
                        let q2 = q_squared(&k);
                        coefficients(st.hadron, proj, cur, &k)
                            .into_iter()
                            .map(|(ff, kc)| kc * truth(ff, q2, s))
                            .sum()
                    };
                    let central = value(None);
                    let samples: Vec<Complex<f64>> = (0..n).map(|s| value(Some(s))).collect();
                    out.push(ChannelValue {
                        pf,
                        q,
                        current: cur,
                        projector: proj,
                        re: Resampled::new(
                            central.re,
                            samples.iter().map(|z| z.re).collect(),
                            Scheme::Jackknife,
                        ),
                        im: Resampled::new(
                            central.im,
                            samples.iter().map(|z| z.im).collect(),
                            Scheme::Jackknife,
                        ),
                    });
                }
            }
        }
        out
    }

    // Exactly consistent synthetic ratios (built from the trace formula with per-sample GE, GM,
    // GA, GP and per-sample masses) in random frames must give the form factors back to 1e-10
    // on every sample: the least-squares solve of a consistent system is exact (linear algebra).
    #[test]
    fn exact_synthetic_ratios_are_recovered() {
        let mut rng = ChaCha8Rng::seed_from_u64(21);
        let n = 12;
        let mass = Resampled::new(
            0.5,
            (0..n)
                .map(|_| 0.5 + 0.01 * rng.gen_range(-1.0..1.0))
                .collect(),
            Scheme::Jackknife,
        );
        let poles: Vec<f64> = (0..=n).map(|_| rng.gen_range(0.6..1.0)).collect();
        let norms: Vec<f64> = (0..=n).map(|_| rng.gen_range(0.95..1.05)).collect();
        let pole = move |s: Option<usize>| poles[s.map_or(n, |i| i)];
        let norm = move |s: Option<usize>| norms[s.map_or(n, |i| i)];
        let truth = move |ff: FormFactor, q2: f64, s: Option<usize>| {
            norm(s)
                * match ff {
                    FormFactor::GE => dipole(q2, 1.0, pole(s)),
                    FormFactor::GM => dipole(q2, 4.7, 1.1 * pole(s)),
                    FormFactor::GA => dipole(q2, 1.27, 1.3 * pole(s)),
                    FormFactor::GP => 4.0 * 0.25 * 1.27 / (q2 + 0.02),
                    _ => 0.0,
                }
        };
        let moms = all_momenta(3);
        let frames: Vec<(Momentum, Momentum)> = (0..40)
            .map(|_| {
                (
                    moms[rng.gen_range(0..moms.len())],
                    moms[rng.gen_range(0..moms.len())],
                )
            })
            .collect();
        let st = setup(mass);
        let currents = &Current::ALL[..8]; // V1..V4, A1..A4
        let chans = exact_channels(&st, &frames, currents, &truth);
        {
            let weights = Weighting::Diagonal;
            let settings = DecompositionSettings {
                weights,
                ..Default::default()
            };
            let d = decompose(&chans, &st, &settings).expect("decomposition runs");
            assert!(
                d.shells.len() > 10,
                "many shells solved: {}",
                d.shells.len()
            );
            let mut checked = 0;
            for sh in &d.shells {
                for (ff, g) in &sh.form_factors {
                    let want = truth(*ff, sh.q2.central, None);
                    assert!(
                        (g.central - want).abs() < 1e-10 * (1.0 + want.abs()),
                        "{} {ff}: {} vs {want}",
                        sh.label,
                        g.central
                    );
                    for s in 0..n {
                        let want = truth(*ff, sh.q2.samples[s], Some(s));
                        assert!((g.samples[s] - want).abs() < 1e-10 * (1.0 + want.abs()));
                    }
                    checked += 1;
                }
                if let Some(c) = sh.chi2_dof {
                    assert!(c < 1e-10, "exact data have chi2 zero: {c} in {}", sh.label);
                }
            }
            assert!(checked > 20);
            // Shells where the trace gives no information at all are reported, not solved.
            for sk in &d.skipped {
                assert!(!sk.reason.is_empty());
            }
        }
    }

    // Gaussian noise of known size on per-configuration values: the decomposition chi2/dof,
    // with weights from the jackknife variances, averages to 1 over seeded trials
    // (chi-square distribution of a correctly weighted linear least-squares fit).
    #[test]
    fn chi2_per_dof_near_one_with_known_noise() {
        let n_cfg = 200;
        let st = setup(Resampled::constant(0.5, n_cfg, Scheme::Jackknife));
        let truth = |ff: FormFactor, q2: f64, _: Option<usize>| match ff {
            FormFactor::GE => dipole(q2, 1.0, 0.8),
            _ => dipole(q2, 4.7, 0.85),
        };
        let frames: Vec<(Momentum, Momentum)> = all_momenta(1)
            .into_iter()
            .filter(|q| q != &[0, 0, 0])
            .map(|q| ([0, 0, 0], q))
            .collect();
        let currents = [Current::V1, Current::V2, Current::V3, Current::V4];
        let exact = exact_channels(&st, &frames, &currents, &truth);
        for weights in [Weighting::Diagonal, Weighting::Full, Weighting::Shrinkage] {
            let settings = DecompositionSettings {
                weights,
                ..Default::default()
            };
            chi2_trials(&exact, &st, &settings, n_cfg, &truth);
        }
    }

    fn chi2_trials(
        exact: &[ChannelValue],
        st: &KinematicSetup,
        settings: &DecompositionSettings,
        n_cfg: usize,
        truth: &dyn Fn(FormFactor, f64, Option<usize>) -> f64,
    ) {
        let plan = ResamplePlan::jackknife(n_cfg);
        let mut rng = ChaCha8Rng::seed_from_u64(22);
        let sigma = 0.05;
        let mut sum = 0.0;
        let mut rows = 0;
        let trials = 40;
        for _ in 0..trials {
            let chans: Vec<ChannelValue> = exact
                .iter()
                .map(|c| {
                    let mut noisy = |v: f64| {
                        let x: Vec<f64> =
                            (0..n_cfg).map(|_| v + sigma * normal(&mut rng)).collect();
                        plan.mean(&x)
                    };
                    ChannelValue {
                        re: noisy(c.re.central),
                        im: noisy(c.im.central),
                        ..c.clone()
                    }
                })
                .collect();
            let d = decompose(&chans, st, settings).expect("runs");
            assert_eq!(d.shells.len(), 1, "{:?}", d.skipped);
            let sh = &d.shells[0];
            rows = sh.dof + sh.form_factors.len();
            assert!(sh.dof > 10);
            sum += sh.chi2_dof.expect("dof > 0");
            // The form factors come back within 5 sigma.
            for (ff, g) in &sh.form_factors {
                let want = truth(*ff, sh.q2.central, None);
                assert!(
                    (g.central - want).abs() < 5.0 * g.error(),
                    "{ff}: {} +- {} vs {want}",
                    g.central,
                    g.error()
                );
            }
            assert!(
                sh.n_dropped > 0,
                "channels with vanishing K are dropped and counted"
            );
        }
        let mean = sum / trials as f64;
        // Diagonal weights: chi2/dof averages to 1. Full covariance estimated from N samples
        // over d points: the inverse is biased high by (N - 1)/(N - d - 2) (Hartlap, Simon &
        // Schneider, A&A 464 (2007) 399).
        let want = match settings.weights {
            // Uncorrelated noise: the Ledoit–Wolf intensity is near 1, i.e. near-diagonal weights.
            Weighting::Diagonal | Weighting::Shrinkage => 1.0,
            Weighting::Full => (n_cfg as f64 - 1.0) / (n_cfg as f64 - rows as f64 - 2.0),
        };
        assert!(
            (mean - want).abs() < 0.1,
            "mean chi2/dof {mean}, expected {want} ({rows} rows)"
        );
    }

    // Phase convention: data multiplied by -i with a declared phase i for that current give the
    // same form factors as the plain data (methods.md §5, per-current phase).
    #[test]
    fn phase_convention_is_undone() {
        let n = 6;
        let st = setup(Resampled::new(
            0.5,
            (0..n).map(|s| 0.5 + 0.001 * s as f64).collect(),
            Scheme::Jackknife,
        ));
        let truth = |ff: FormFactor, q2: f64, s: Option<usize>| {
            let w = 1.0 + 0.01 * s.map_or(0.0, |i| i as f64);
            match ff {
                FormFactor::GE => w * dipole(q2, 1.0, 0.8),
                _ => w * dipole(q2, 4.7, 0.85),
            }
        };
        let frames = vec![
            ([0, 0, 0], [1, 0, 0]),
            ([0, 0, 0], [0, 1, 0]),
            ([0, 0, 0], [0, 0, -1]),
        ];
        let plain = exact_channels(
            &st,
            &frames,
            &[Current::V1, Current::V2, Current::V3, Current::V4],
            &truth,
        );
        let rotated: Vec<ChannelValue> = plain
            .iter()
            .map(|c| {
                // data convention: -i times ours; declared phase i restores it.
                ChannelValue {
                    re: c.im.clone(),
                    im: -&c.re,
                    ..c.clone()
                }
            })
            .collect();
        let mut settings = DecompositionSettings::default();
        for v in ["V1", "V2", "V3", "V4"] {
            settings.phases.insert(
                v.into(),
                formfactory::kinematics::Phase::parse("i").expect("phase"),
            );
        }
        let a = decompose(&plain, &st, &DecompositionSettings::default()).expect("runs");
        let b = decompose(&rotated, &st, &settings).expect("runs");
        assert_eq!(a.shells.len(), b.shells.len());
        for (x, y) in a.shells.iter().zip(&b.shells) {
            for ((fx, gx), (fy, gy)) in x.form_factors.iter().zip(&y.form_factors) {
                assert_eq!(fx, fy);
                assert_abs_diff_eq!(gx.central, gy.central, epsilon = 1e-12);
            }
        }
        let mut bad = DecompositionSettings::default();
        bad.phases
            .insert("X9".into(), formfactory::kinematics::Phase::ONE);
        assert!(
            decompose(&plain, &st, &bad).is_err(),
            "unknown current in phases is an error"
        );
    }

    fn varying_mass(n: usize) -> Resampled {
        Resampled::new(
            0.5,
            (0..n).map(|s| 0.5 + 0.002 * (s as f64 - 3.0)).collect(),
            Scheme::Jackknife,
        )
    }

    fn varying_truth(ff: FormFactor, q2: f64, s: Option<usize>) -> f64 {
        let w = 1.0 + 0.01 * s.map_or(0.0, |i| i as f64);
        match ff {
            FormFactor::GE | FormFactor::F => w * dipole(q2, 1.0, 0.8),
            _ => w * dipole(q2, 4.7, 0.85),
        }
    }

    // Twisted boundary conditions (methods.md §1): shells are formed by equal Q^2; channels
    // related by a rotation that the twist does not break share a shell, the form factors
    // come back exactly, and every shell's channels have one Q^2.
    #[test]
    fn twisted_shells_by_q2_value() {
        let n = 8;
        let st = KinematicSetup {
            twist_sink: [0.7, 0.0, 0.0],
            twist_source: [0.7, 0.0, 0.0],
            ..setup(varying_mass(n))
        };
        let frames: Vec<(Momentum, Momentum)> =
            all_momenta(2).into_iter().map(|q| ([0, 0, 0], q)).collect();
        let currents = [Current::V1, Current::V2, Current::V3, Current::V4];
        let chans = exact_channels(&st, &frames, &currents, &varying_truth);
        let d = decompose(&chans, &st, &DecompositionSettings::default()).expect("runs");
        let mut distinct: Vec<f64> = frames
            .iter()
            .map(|&(pf, q)| q_squared(&st.on_shell(pf, q, None).expect("kinematics")))
            .collect();
        distinct.sort_by(f64::total_cmp);
        distinct.dedup_by(|a, b| (*a - *b).abs() < 1e-9);
        assert_eq!(d.shells.len() + d.skipped.len(), distinct.len());
        assert!(
            d.shells.len() >= distinct.len() - 1,
            "skipped: {:?}",
            d.skipped
        );
        for sh in &d.shells {
            assert!(sh.label.starts_with("Q2="), "{}", sh.label);
            for (ff, g) in &sh.form_factors {
                let want = varying_truth(*ff, sh.q2.central, None);
                assert!((g.central - want).abs() < 1e-10, "{} {ff}", sh.label);
                for s in 0..n {
                    let want = varying_truth(*ff, sh.q2.samples[s], Some(s));
                    assert!((g.samples[s] - want).abs() < 1e-10);
                }
            }
        }
    }

    // Fitted energies equal to the dispersion energies give the same decomposition as the
    // dispersion relation itself; a shell needing a momentum without a fitted energy is skipped
    // with the reason.
    #[test]
    fn fitted_energies_path() {
        let n = 8;
        let mass = varying_mass(n);
        let st = setup(mass.clone());
        let frames = vec![
            ([0, 0, 0], [1, 0, 0]),
            ([1, 0, 0], [1, 1, 0]),
            ([0, 1, 0], [0, 0, 1]),
        ];
        let chans = exact_channels(
            &st,
            &frames,
            &[Current::V1, Current::V2, Current::V3, Current::V4],
            &varying_truth,
        );
        let mut map = std::collections::BTreeMap::new();
        for p in all_momenta(2) {
            let pv = lattice_momentum(p, L, [0.0; 3]);
            map.insert(p, mass.map(|m| continuum_energy(m, pv)));
        }
        let fitted = KinematicSetup {
            energies: Energies::Fitted(map.clone()),
            ..st.clone()
        };
        let a = decompose(&chans, &st, &DecompositionSettings::default()).expect("runs");
        let b = decompose(&chans, &fitted, &DecompositionSettings::default()).expect("runs");
        assert_eq!(a.shells.len(), b.shells.len());
        for (x, y) in a.shells.iter().zip(&b.shells) {
            assert_abs_diff_eq!(x.q2.central, y.q2.central, epsilon = 1e-14);
            for ((_, gx), (_, gy)) in x.form_factors.iter().zip(&y.form_factors) {
                assert_abs_diff_eq!(gx.central, gy.central, epsilon = 1e-12);
            }
        }
        // Issue 10 gate: an unphysical source energy (E_i = m + 2, so (E_f - E_i)² > |q|²)
        // makes Q² < 0; that shell is skipped with the momenta named, the others carry on.
        let mut bad = map.clone();
        bad.insert([-1, 0, 0], mass.map(|m| m + 2.0));
        let timelike = KinematicSetup {
            energies: Energies::Fitted(bad),
            ..st.clone()
        };
        let d = decompose(&chans, &timelike, &DecompositionSettings::default()).expect("runs");
        assert_eq!((d.shells.len(), d.skipped.len()), (2, 1), "{:?}", d.skipped);
        let why = &d.skipped[0].reason;
        assert!(
            why.contains("Q²") && why.contains("< 0") && why.contains("[-1, 0, 0]"),
            "{why}"
        );
        map.remove(&[0, 1, -1]);
        let missing = KinematicSetup {
            energies: Energies::Fitted(map),
            ..st
        };
        // Reported per shell, the other shells carry on.
        let d = decompose(&chans, &missing, &DecompositionSettings::default()).expect("runs");
        assert_eq!(d.shells.len(), 2);
        assert_eq!(d.skipped.len(), 1);
        assert!(
            d.skipped[0].reason.contains("[0, 1, -1]"),
            "{}",
            d.skipped[0].reason
        );
    }

    // Spin 0 (methods.md §5): channels V_mu with projector none decompose into F.
    // A shell whose channels fix only one combination of G_A and G_P (q = (0,0,1), sink at
    // rest, the pol3 projector alone: the A3 and A4 rows are proportional, singular values
    // 1 and ~1e-17) reports neither and says what is missing; with the pol1 projector added
    // both are determined and recovered exactly (analytic: exact synthetic ratios).
    #[test]
    fn singular_shell_reports_nothing_and_says_why() {
        let n = 20;
        let st = setup(varying_mass(n));
        let frames = [([0, 0, 0], [0, 0, 1])];
        let currents = [Current::A1, Current::A2, Current::A3, Current::A4];
        let all = exact_channels(&st, &frames, &currents, &varying_truth);
        let pol3: Vec<ChannelValue> = all
            .iter()
            .filter(|c| c.projector == Projector::Pol(3))
            .cloned()
            .collect();
        // With fitted energies the A3 and A4 rows are proportional only up to the energies'
        // noise: here 0.3 % above the continuum value at |n|^2 = 1 (a fitted energy a few
        // tenths of a sigma off), which before the on-shell rank left a condition number of
        // a few hundred and reported G_A and G_P from the noise (issue 11 item 2, the
        // nucleon-axial demo: G_A = 1.7(118), G_P = 20(166) at this shell).
        let mut map = std::collections::BTreeMap::new();
        for p in all_momenta(1) {
            let pv = lattice_momentum(p, L, [0.0; 3]);
            let off = if p == [0, 0, 0] { 1.0 } else { 1.003 };
            map.insert(p, st.mass.map(|m| off * continuum_energy(m, pv)));
        }
        let off_shell = KinematicSetup {
            energies: Energies::Fitted(map),
            ..st.clone()
        };
        for setup in [&st, &off_shell] {
            let d = decompose(&pol3, setup, &DecompositionSettings::default()).expect("runs");
            assert!(d.shells.iter().all(|s| s.form_factors.is_empty()), "{d:?}");
            assert_eq!(d.skipped.len(), 1, "{d:?}");
            let reason = &d.skipped[0].reason;
            assert!(
                reason.contains("GA")
                    && reason.contains("GP")
                    && reason.contains("q direction or projector"),
                "{reason}"
            );
        }
        let both: Vec<ChannelValue> = all
            .iter()
            .filter(|c| matches!(c.projector, Projector::Pol(1) | Projector::Pol(3)))
            .cloned()
            .collect();
        let d = decompose(&both, &st, &DecompositionSettings::default()).expect("runs");
        assert_eq!(d.shells.len(), 1, "{d:?}");
        let shell = &d.shells[0];
        assert!(shell.undetermined.is_empty());
        assert!(shell.condition.is_finite() && shell.condition >= 1.0);
        assert_eq!(shell.form_factors.len(), 2);
        for (ff, g) in &shell.form_factors {
            let q2 = shell.q2.central;
            assert_abs_diff_eq!(g.central, varying_truth(*ff, q2, None), epsilon = 1e-9);
        }
    }

    #[test]
    fn spin0_decomposition() {
        let n = 8;
        let st = KinematicSetup {
            hadron: Hadron::Spin0,
            ..setup(varying_mass(n))
        };
        let mut chans = Vec::new();
        for q in all_momenta(2) {
            for cur in [Current::V1, Current::V2, Current::V3, Current::V4] {
                let pf = [0, 0, 1];
                let value = |s: Option<usize>| -> Complex<f64> {
                    let k = st.on_shell(pf, q, s).expect("kinematics");
                    let q2 = q_squared(&k);
                    coefficients(Hadron::Spin0, Projector::None, cur, &k)
                        .into_iter()
                        .map(|(ff, kc)| kc * varying_truth(ff, q2, s))
                        .sum()
                };
                let samples: Vec<Complex<f64>> = (0..n).map(|s| value(Some(s))).collect();
                let central = value(None);
                chans.push(ChannelValue {
                    pf,
                    q,
                    current: cur,
                    projector: Projector::None,
                    re: Resampled::new(
                        central.re,
                        samples.iter().map(|z| z.re).collect(),
                        Scheme::Jackknife,
                    ),
                    im: Resampled::new(
                        central.im,
                        samples.iter().map(|z| z.im).collect(),
                        Scheme::Jackknife,
                    ),
                });
            }
        }
        let d = decompose(&chans, &st, &DecompositionSettings::default()).expect("runs");
        assert!(d.shells.len() > 3);
        for sh in &d.shells {
            assert_eq!(sh.form_factors.len(), 1);
            let (ff, g) = &sh.form_factors[0];
            assert_eq!(*ff, FormFactor::F);
            assert_abs_diff_eq!(
                g.central,
                varying_truth(*ff, sh.q2.central, None),
                epsilon = 1e-10
            );
        }
    }

    // Forward charges through the decomposition: g_S from Pi(Gamma_0, S), g_T from
    // Pi(Gamma_k, T_ij) (methods.md §5 check values); tensor channels with q != 0 are reported
    // as skipped, since the vertex sigma_mu_nu g_T is the forward one only.
    #[test]
    fn forward_scalar_and_tensor_charges() {
        let n = 8;
        let st = setup(varying_mass(n));
        let truth = |ff: FormFactor, _q2: f64, s: Option<usize>| {
            let w = 1.0 + 0.01 * s.map_or(0.0, |i| i as f64);
            match ff {
                FormFactor::GS => 1.1 * w,
                FormFactor::GT => 0.98 * w,
                _ => 0.0,
            }
        };
        let frames = vec![([0, 0, 0], [0, 0, 0]), ([0, 0, 0], [1, 0, 0])];
        let chans = exact_channels(
            &st,
            &frames,
            &[Current::S, Current::T12, Current::T13, Current::T23],
            &truth,
        );
        let d = decompose(&chans, &st, &DecompositionSettings::default()).expect("runs");
        let get = |ff: FormFactor| {
            d.shells
                .iter()
                .filter(|sh| sh.label == "nf2=0 ni2=0 nq2=0")
                .flat_map(|sh| sh.form_factors.iter())
                .find(|(f, _)| *f == ff)
                .map(|(_, g)| g.central)
        };
        assert_abs_diff_eq!(
            get(FormFactor::GS).expect("g_S solved"),
            1.1,
            epsilon = 1e-12
        );
        assert_abs_diff_eq!(
            get(FormFactor::GT).expect("g_T solved"),
            0.98,
            epsilon = 1e-12
        );
        assert!(
            d.skipped.iter().any(|s| s.reason.contains("forward")),
            "{:?}",
            d.skipped
        );
    }

    // Flavour combination per configuration: u - d of known series is their difference; a
    // missing term is an error naming the channel.
    #[test]
    fn isovector_and_isoscalar_combinations() {
        let key = |f: &str, d: Option<Diagram>| ThreePointKey {
            tsep: 8,
            pf: [0, 0, 0],
            q: [1, 0, 0],
            current: Current::V4,
            projector: Projector::Unpol,
            flavor: Some(f.into()),
            diagram: d,
            ops: None,
        };
        let series = |x: f64| {
            let mut s = Series::zeros(9, 3);
            for (i, v) in s.re.iter_mut().enumerate() {
                *v = x + i as f64;
            }
            for (i, v) in s.im.iter_mut().enumerate() {
                *v = -x * i as f64;
            }
            s
        };
        let mut data = ThreePointData {
            configs: vec![1, 2, 3],
            ..Default::default()
        };
        data.channels
            .insert(key("u", Some(Diagram::Connected)), series(3.0));
        data.channels
            .insert(key("d", Some(Diagram::Connected)), series(1.0));
        data.channels
            .insert(key("u", Some(Diagram::Disconnected)), series(0.5));
        data.channels
            .insert(key("d", Some(Diagram::Disconnected)), series(0.25));
        let out = combine(
            &data,
            &[
                FlavorCombo::isovector(Some(Diagram::Connected)),
                FlavorCombo::isoscalar(),
            ],
        )
        .expect("combines");
        assert_eq!(out.channels.len(), 2);
        let iv = &out.channels[&ThreePointKey {
            diagram: None,
            ..key("u-d", None)
        }];
        for v in &iv.re {
            assert_abs_diff_eq!(*v, 2.0, epsilon = 1e-14);
        }
        for (i, v) in iv.im.iter().enumerate() {
            assert_abs_diff_eq!(*v, -2.0 * i as f64, epsilon = 1e-12);
        }
        let is = &out.channels[&key("u+d", None)];
        for (i, v) in is.re.iter().enumerate() {
            assert_abs_diff_eq!(*v, 4.75 + 4.0 * i as f64, epsilon = 1e-12);
        }
        data.channels.remove(&key("d", Some(Diagram::Disconnected)));
        let err = combine(&data, &[FlavorCombo::isoscalar()]).expect_err("missing term");
        assert!(err.to_string().contains("`d`"), "{err}");
    }
}

/// Random on-shell kinematics in a general frame (continuum dispersion).
fn random_frame(rng: &mut ChaCha8Rng) -> OnShell {
    let m = rng.gen_range(0.3..1.2);
    let pf = [0; 3].map(|_: i32| rng.gen_range(-0.8..0.8));
    let pi = [0; 3].map(|_: i32| rng.gen_range(-0.8..0.8));
    OnShell {
        mass: m,
        pf,
        pi,
        ef: continuum_energy(m, pf),
        ei: continuum_energy(m, pi),
    }
}

/// `sum_mu q_mu K_mu(ff)` over the four components of a vector or axial current, with the
/// Euclidean `q = (p_f - p_i, i (E_f - E_i))`.
fn contract_q(
    k: &OnShell,
    proj: Projector,
    currents: [Current; 4],
    ff: FormFactor,
) -> Complex<f64> {
    let q = [
        c(k.pf[0] - k.pi[0], 0.0),
        c(k.pf[1] - k.pi[1], 0.0),
        c(k.pf[2] - k.pi[2], 0.0),
        c(0.0, k.ef - k.ei),
    ];
    (0..4)
        .map(|mu| q[mu] * k_of(Hadron::Spin1Half, proj, currents[mu], k, ff))
        .sum()
}

// Ward identities of on-shell spinors in any frame (analytic, from slash(P)^2 = -m^2 in
// Euclidean space): vector current conservation q_mu Pi(V_mu) = 0 for G_E and G_M alike;
// for the axial vertex q_mu Pi(A_mu)[G_A] = 2 i m Pi(P)[G_5] and
// q_mu Pi(A_mu)[G_P] = -i Q^2/(2m) Pi(P)[G_5] (PCAC structure of the trace).
#[test]
fn ward_identities_in_random_frames() {
    let mut rng = ChaCha8Rng::seed_from_u64(16);
    let vec4 = [Current::V1, Current::V2, Current::V3, Current::V4];
    let ax4 = [Current::A1, Current::A2, Current::A3, Current::A4];
    let mut nontrivial = 0;
    for _ in 0..25 {
        let k = random_frame(&mut rng);
        let q2 = q_squared(&k);
        for proj in [
            Projector::Unpol,
            Projector::Pol(1),
            Projector::Pol(2),
            Projector::Pol(3),
        ] {
            assert_c(
                contract_q(&k, proj, vec4, FormFactor::GE),
                c(0.0, 0.0),
                "q.V GE",
            );
            assert_c(
                contract_q(&k, proj, vec4, FormFactor::GM),
                c(0.0, 0.0),
                "q.V GM",
            );
            let p = k_of(Hadron::Spin1Half, proj, Current::P, &k, FormFactor::G5);
            nontrivial += usize::from(p.norm() > 1e-3);
            assert_c(
                contract_q(&k, proj, ax4, FormFactor::GA),
                c(0.0, 2.0 * k.mass) * p,
                "q.A GA",
            );
            assert_c(
                contract_q(&k, proj, ax4, FormFactor::GP),
                c(0.0, -q2 / (2.0 * k.mass)) * p,
                "q.A GP",
            );
        }
    }
    assert!(
        nontrivial > 50,
        "the axial identities are tested on non-zero Pi(P): {nontrivial}"
    );
}

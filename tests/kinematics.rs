//! Integration tests: kinematics (methods.md §1, §5).

use approx::assert_abs_diff_eq;
use formfactory::data::{Current, Projector};
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

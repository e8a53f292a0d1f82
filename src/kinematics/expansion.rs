//! The kinematic coefficients of one spin-1/2 channel as a function of the energies and the
//! mass, for the resamples of a run: the momenta of a channel are fixed, only `E_f`, `E_i`
//! and `m` change from resample to resample, and the trace of [`super::factors`] is linear in
//! each of its two numerators.
//!
//! With `P = (p, iE)` the numerator is `-i slash(P) + m = S + E gamma_4 + m` with the
//! constant `S = -i gamma_j p_j`, so
//! `Tr[Gamma (S_f + E_f gamma_4 + m) V (S_i + E_i gamma_4 + m)] = sum_ab u_a v_b T_ab(V)`
//! with `u = (1, E_f, m)`, `v = (1, E_i, m)` and the nine traces
//! `T_ab(V) = Tr[L_a V R_b]`, `L = (Gamma S_f, Gamma gamma_4, Gamma)`, `R = (S_i, gamma_4, 1)`.
//! The vertices that hold `q` are split the same way: `q_4 = i (E_f - E_i)`, so
//! `sigma_mu_nu q_nu = C + (E_f - E_i) i sigma_mu4` with the constant `C = sigma_mu_j q_j`,
//! and the induced pseudoscalar's `q_mu` multiplies a constant trace. The traces are computed
//! once per channel by the same 4x4 matrix products as [`super::coefficients`]; a resample
//! then costs a few dozen multiplications instead of a dozen matrix products, and agrees with
//! the direct trace to rounding (unit tests below; the direct trace itself is checked against
//! the closed forms and Ward identities in `tests/kinematics.rs`).

use super::dirac::{clifford, propagator_numerator, M4};
use super::factors::{clean, projector_matrix, pseudoscalar_factor, sachs, trace_norm};
use super::momentum::OnShell;
use super::Hadron;
use crate::data::{Current, CurrentKind, Projector};
use nalgebra::Complex;

const I: Complex<f64> = Complex::new(0.0, 1.0);

/// The nine traces `T_ab(V)` of one vertex, `[a][b]`.
type Traces = [[Complex<f64>; 3]; 3];

/// The coefficients of one channel, ready to be evaluated at any energies and mass.
#[derive(Clone, Debug, PartialEq)]
pub(crate) struct Expansion {
    current: Current,
    /// Sink and source three-momenta the traces were computed for.
    pf: [f64; 3],
    pi: [f64; 3],
    /// Per vertex of the current (see [`vertices`]).
    traces: Vec<Traces>,
}

impl Expansion {
    /// The expansion of the channel with this projector and current at the momenta of `k`
    /// (its energies and mass are not used); `None` where [`super::coefficients`] has no
    /// trace to expand: a spin-0 hadron, or a projector without a spin-1/2 decomposition.
    pub(crate) fn new(
        hadron: Hadron,
        projector: Projector,
        current: Current,
        k: &OnShell,
    ) -> Option<Expansion> {
        if hadron != Hadron::Spin1Half {
            return None;
        }
        let gamma_proj = projector_matrix(projector)?;
        let c = clifford();
        let spatial = |p: [f64; 3]| {
            let v = [p[0], p[1], p[2], 0.0].map(|x| Complex::new(x, 0.0));
            propagator_numerator(&v, 0.0)
        };
        let left = [gamma_proj * spatial(k.pf), gamma_proj * c.g[3], gamma_proj];
        let right = [spatial(k.pi), c.g[3], M4::identity()];
        let q = [0, 1, 2].map(|i| Complex::new(k.pf[i] - k.pi[i], 0.0));
        let traces = vertices(current, &q)
            .iter()
            .map(|v| {
                let mut t = [[Complex::new(0.0, 0.0); 3]; 3];
                for (row, l) in t.iter_mut().zip(&left) {
                    for (x, r) in row.iter_mut().zip(&right) {
                        *x = (l * v * r).trace();
                    }
                }
                t
            })
            .collect();
        Some(Expansion {
            current,
            pf: k.pf,
            pi: k.pi,
            traces,
        })
    }

    /// The coefficients at `k`, in the order of [`super::FormFactor::of`], cleaned as
    /// [`super::coefficients`] cleans them; `None` when the momenta of `k` are not those of
    /// the expansion.
    pub(crate) fn evaluate(&self, k: &OnShell) -> Option<Vec<Complex<f64>>> {
        if k.pf != self.pf || k.pi != self.pi {
            return None;
        }
        let (m, ef, ei) = (k.mass, k.ef, k.ei);
        let u = [1.0, ef, m];
        let v = [1.0, ei, m];
        let norm = trace_norm(ef, ei, m);
        let trace = |i: usize| -> Option<Complex<f64>> {
            let t = self.traces.get(i)?;
            let mut sum = Complex::new(0.0, 0.0);
            for (row, ua) in t.iter().zip(u) {
                for (x, vb) in row.iter().zip(v) {
                    sum += x * (ua * vb);
                }
            }
            Some(sum / norm)
        };
        let two_m = 2.0 * m;
        let mut out = match self.current.kind() {
            CurrentKind::Vector => {
                let f1 = trace(0)?;
                let f2 = -(trace(1)? + trace(2)? * (ef - ei)) / two_m;
                sachs(f1, f2, k).to_vec()
            }
            CurrentKind::Axial => {
                let mu = self.current.indices()[0] - 1;
                let q_mu = if mu == 3 {
                    Complex::new(0.0, ef - ei)
                } else {
                    Complex::new(self.pf[mu] - self.pi[mu], 0.0)
                };
                vec![trace(0)?, trace(1)? * pseudoscalar_factor(q_mu, two_m)]
            }
            CurrentKind::Scalar | CurrentKind::Pseudoscalar | CurrentKind::Tensor => {
                vec![trace(0)?]
            }
        };
        clean(&mut out);
        Some(out)
    }
}

/// The constant vertices of `current` whose traces the coefficients need, with `q` the
/// spatial momentum transfer: vector `mu`: `gamma_mu`, `C = sigma_mu_j q_j`, `i sigma_mu4`
/// (F1 and the two parts of F2's `sigma_mu_nu q_nu`); axial `mu`: `gamma_mu gamma_5`,
/// `gamma_5` (G_A, and G_P before its factor `-i q_mu / 2m`); scalar `1`, pseudoscalar
/// `gamma_5`, tensor `sigma_mu_nu`.
fn vertices(current: Current, q: &[Complex<f64>; 3]) -> Vec<M4> {
    let c = clifford();
    let idx = current.indices();
    match current.kind() {
        CurrentKind::Vector => {
            let mu = idx[0] - 1;
            let spatial = (0..3).fold(M4::zeros(), |acc, nu| acc + c.sigma[mu][nu] * q[nu]);
            vec![c.g[mu], spatial, c.sigma[mu][3] * I]
        }
        CurrentKind::Axial => vec![c.g[idx[0] - 1] * c.g5, c.g5],
        CurrentKind::Scalar => vec![M4::identity()],
        CurrentKind::Pseudoscalar => vec![c.g5],
        CurrentKind::Tensor => vec![c.sigma[idx[0] - 1][idx[1] - 1]],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kinematics::coefficients;
    use crate::kinematics::momentum::continuum_energy;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    const PROJECTORS: [Projector; 4] = [
        Projector::Unpol,
        Projector::Pol(1),
        Projector::Pol(2),
        Projector::Pol(3),
    ];

    /// A random frame: momenta up to 0.6 per direction, mass 0.3..1.2, energies on shell
    /// or up to 5 % off it (fitted energies are off shell by their noise).
    fn random_frame(rng: &mut ChaCha8Rng) -> OnShell {
        let mut p = || [0; 3].map(|_: i32| rng.gen_range(-0.6..0.6));
        let (pf, pi) = (p(), p());
        let mass = rng.gen_range(0.3..1.2);
        let ef = continuum_energy(mass, pf) * rng.gen_range(0.95..1.05);
        let ei = continuum_energy(mass, pi) * rng.gen_range(0.95..1.05);
        OnShell {
            mass,
            pf,
            pi,
            ef,
            ei,
        }
    }

    #[test]
    fn the_expansion_equals_the_direct_trace_at_other_energies() {
        // The expansion is built at one frame's energies and evaluated at the energies and
        // mass of another with the same momenta (a resample), against the direct trace of
        // every projector and current there.
        let mut rng = ChaCha8Rng::seed_from_u64(14);
        for _ in 0..200 {
            let built = random_frame(&mut rng);
            let other = random_frame(&mut rng);
            let at = OnShell {
                pf: built.pf,
                pi: built.pi,
                ..other
            };
            for projector in PROJECTORS {
                for current in Current::ALL {
                    let e = Expansion::new(Hadron::Spin1Half, projector, current, &built)
                        .expect("spin 1/2 with a spin-1/2 projector");
                    let got = e.evaluate(&at).expect("same momenta");
                    let want = coefficients(Hadron::Spin1Half, projector, current, &at);
                    assert_eq!(got.len(), want.len());
                    let scale = want.iter().map(|(_, c)| c.norm()).fold(1.0, f64::max);
                    for (g, (ff, w)) in got.iter().zip(&want) {
                        assert!(
                            (g - w).norm() <= 1e-13 * scale,
                            "{projector:?} {current:?} {ff:?}: {g} against {w} at {at:?}"
                        );
                        // A part the trace cleans to zero is zero here too, and vice versa.
                        assert_eq!((g.re == 0.0, g.im == 0.0), (w.re == 0.0, w.im == 0.0));
                    }
                }
            }
        }
    }

    #[test]
    fn the_expansion_gives_the_closed_forms_with_the_sink_at_rest() {
        // Check values of docs/methods.md §5 (sink at rest, on shell, N = sqrt(2E(E+m)) with
        // E the source energy): Pi(Gamma_0, V_4) = sqrt((E+m)/(2E)) G_E,
        // Pi(Gamma_0, V_j) = i q_j / N G_E, Pi(Gamma_k, V_j) = eps_jkl q_l / N G_M. The
        // expansion is built at one mass and evaluated at another (a resample's).
        let eps = |j: usize, k: usize, l: usize| {
            ((j as i32 - k as i32) * (k as i32 - l as i32) * (l as i32 - j as i32)) as f64 / 2.0
        };
        let mut rng = ChaCha8Rng::seed_from_u64(11);
        let zero = Complex::new(0.0, 0.0);
        let close = |got: Complex<f64>, want: Complex<f64>, what: &str| {
            assert!((got - want).norm() < 1e-12, "{what}: {got} against {want}");
        };
        for _ in 0..25 {
            let q = [0; 3].map(|_: i32| rng.gen_range(-0.8..0.8));
            let pi = q.map(|x| -x);
            let frame = |m: f64| OnShell {
                mass: m,
                pf: [0.0; 3],
                pi,
                ef: m,
                ei: continuum_energy(m, pi),
            };
            let built = frame(rng.gen_range(0.3..1.2));
            let k = frame(rng.gen_range(0.3..1.2));
            let (m, e) = (k.mass, k.ei);
            let n = (2.0 * e * (e + m)).sqrt();
            let at = |projector, current| {
                Expansion::new(Hadron::Spin1Half, projector, current, &built)
                    .and_then(|x| x.evaluate(&k))
                    .expect("spin 1/2, same momenta")
            };
            let v4 = at(Projector::Unpol, Current::V4);
            close(
                v4[0],
                Complex::new(((e + m) / (2.0 * e)).sqrt(), 0.0),
                "G0 V4 GE",
            );
            close(v4[1], zero, "G0 V4 GM");
            for (j, vj) in [Current::V1, Current::V2, Current::V3]
                .into_iter()
                .enumerate()
            {
                let g0 = at(Projector::Unpol, vj);
                close(g0[0], Complex::new(0.0, q[j] / n), "G0 Vj GE");
                close(g0[1], zero, "G0 Vj GM");
                for kk in 0..3 {
                    let gk = at(Projector::Pol(kk as u8 + 1), vj);
                    let want: f64 = (0..3).map(|l| eps(j, kk, l) * q[l]).sum::<f64>() / n;
                    close(gk[0], zero, "Gk Vj GE");
                    close(gk[1], Complex::new(want, 0.0), "Gk Vj GM");
                }
            }
        }
    }

    #[test]
    fn no_expansion_without_a_trace_and_none_at_other_momenta() {
        let k = OnShell {
            mass: 0.5,
            pf: [0.1, 0.0, 0.0],
            pi: [0.0; 3],
            ef: 0.51,
            ei: 0.5,
        };
        assert!(Expansion::new(Hadron::Spin0, Projector::None, Current::V4, &k).is_none());
        assert!(Expansion::new(Hadron::Spin1Half, Projector::None, Current::V4, &k).is_none());
        assert!(Expansion::new(Hadron::Spin1Half, Projector::Pol(4), Current::V4, &k).is_none());
        let e =
            Expansion::new(Hadron::Spin1Half, Projector::Unpol, Current::V1, &k).expect("spin 1/2");
        let moved = OnShell {
            pf: [0.2, 0.0, 0.0],
            ..k
        };
        assert!(e.evaluate(&moved).is_none());
    }
}

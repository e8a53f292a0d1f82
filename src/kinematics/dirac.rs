//! Dirac algebra for the kinematic factors of docs/methods.md §5.
//!
//! Euclidean Hermitian gamma matrices in the Dirac–Pauli basis (`gamma_4 = diag(1, 1, -1, -1)`),
//! `gamma_5 = gamma_1 gamma_2 gamma_3 gamma_4`, `sigma_mu_nu = [gamma_mu, gamma_nu] / (2i)`.
//! Traces do not depend on the basis, so any representation of the Clifford algebra gives the
//! same coefficients; this one makes `(1 + gamma_4)/2` the upper-component projector.

use nalgebra::{Complex, Matrix4};

/// A 4x4 complex matrix.
pub(crate) type M4 = Matrix4<Complex<f64>>;

const ZERO: Complex<f64> = Complex::new(0.0, 0.0);
const ONE: Complex<f64> = Complex::new(1.0, 0.0);
const I: Complex<f64> = Complex::new(0.0, 1.0);

/// Block matrix `[[a, b], [c, d]]` from 2x2 blocks given row-major.
fn blocks(
    a: [Complex<f64>; 4],
    b: [Complex<f64>; 4],
    c: [Complex<f64>; 4],
    d: [Complex<f64>; 4],
) -> M4 {
    let mut m = M4::zeros();
    for r in 0..2 {
        for s in 0..2 {
            m[(r, s)] = a[2 * r + s];
            m[(r, s + 2)] = b[2 * r + s];
            m[(r + 2, s)] = c[2 * r + s];
            m[(r + 2, s + 2)] = d[2 * r + s];
        }
    }
    m
}

/// Pauli matrix `sigma_k`, k = 1..=3, row-major.
fn pauli(k: usize) -> [Complex<f64>; 4] {
    match k {
        1 => [ZERO, ONE, ONE, ZERO],
        2 => [ZERO, -I, I, ZERO],
        _ => [ONE, ZERO, ZERO, -ONE],
    }
}

/// Euclidean `gamma_mu`, mu = 1..=4 (4 = time).
pub(crate) fn gamma(mu: usize) -> M4 {
    let z = [ZERO; 4];
    if mu == 4 {
        return blocks([ONE, ZERO, ZERO, ONE], z, z, [-ONE, ZERO, ZERO, -ONE]);
    }
    let s = pauli(mu);
    blocks(z, s.map(|x| -I * x), s.map(|x| I * x), z)
}

/// `gamma_5 = gamma_1 gamma_2 gamma_3 gamma_4`.
pub(crate) fn gamma5() -> M4 {
    gamma(1) * gamma(2) * gamma(3) * gamma(4)
}

/// `sigma_mu_nu = [gamma_mu, gamma_nu] / (2i)`.
pub(crate) fn sigma(mu: usize, nu: usize) -> M4 {
    let (a, b) = (gamma(mu), gamma(nu));
    (a * b - b * a) / (2.0 * I)
}

/// The gamma matrices, `gamma_5` and `sigma_mu_nu`, built once.
pub(crate) struct Clifford {
    /// `gamma_mu` at index `mu - 1`.
    pub g: [M4; 4],
    /// `gamma_5`.
    pub g5: M4,
    /// `sigma_mu_nu` at `[mu - 1][nu - 1]`.
    pub sigma: [[M4; 4]; 4],
}

/// The shared [`Clifford`] table.
pub(crate) fn clifford() -> &'static Clifford {
    static TABLE: std::sync::OnceLock<Clifford> = std::sync::OnceLock::new();
    TABLE.get_or_init(|| Clifford {
        g: [1, 2, 3, 4].map(gamma),
        g5: gamma5(),
        sigma: [1, 2, 3, 4].map(|mu| [1, 2, 3, 4].map(|nu| sigma(mu, nu))),
    })
}

/// `slash(P) = gamma_mu P_mu` for a complex Euclidean four-vector (index 0..3 = mu 1..4).
pub(crate) fn slash(p: &[Complex<f64>; 4]) -> M4 {
    let g = &clifford().g;
    (0..4).fold(M4::zeros(), |acc, i| acc + g[i] * p[i])
}

/// The positive-energy numerator `-i slash(P) + m`.
pub(crate) fn propagator_numerator(p: &[Complex<f64>; 4], mass: f64) -> M4 {
    slash(p) * (-I) + M4::identity() * Complex::new(mass, 0.0)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn clifford_algebra_and_hermiticity() {
        // Defining relations {gamma_mu, gamma_nu} = 2 delta_mu_nu, gamma_mu Hermitian,
        // gamma_5^2 = 1 (Euclidean conventions of docs/methods.md §5).
        for mu in 1..=4 {
            let g = gamma(mu);
            assert_abs_diff_eq!((g.adjoint() - g).norm(), 0.0, epsilon = 1e-15);
            for nu in 1..=4 {
                let h = gamma(nu);
                let want = if mu == nu { 2.0 } else { 0.0 };
                let anti = g * h + h * g - M4::identity() * Complex::new(want, 0.0);
                assert_abs_diff_eq!(anti.norm(), 0.0, epsilon = 1e-15);
            }
        }
        let g5 = gamma5();
        assert_abs_diff_eq!((g5 * g5 - M4::identity()).norm(), 0.0, epsilon = 1e-15);
        assert_abs_diff_eq!((g5.adjoint() - g5).norm(), 0.0, epsilon = 1e-15);
    }
}

//! Noise of a mock ensemble: Gaussian, correlated across time slices, autocorrelated in
//! Monte Carlo time.
//!
//! Across time the correlation matrix is `exp(-|t - t'| / xi)`, drawn through its Cholesky
//! factor (common practice for correlated Gaussian vectors). Along the configuration axis the
//! vectors follow a stationary AR(1) process `eta_c = rho eta_{c-1} + sqrt(1 - rho^2) w_c`, whose
//! lag-1 autocorrelation is `rho` and integrated autocorrelation time `(1 + rho) / (2 (1 - rho))`
//! (docs/methods.md §7). Every channel draws from its own ChaCha8 stream, numbered by a hash of the
//! channel's label, so results do not depend on the order or the thread that generates them.

use nalgebra::DMatrix;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use sha2::{Digest, Sha256};
use statrs::distribution::Normal;

/// The random stream of one channel: the spec's seed, stream number from `label`.
pub fn channel_rng(seed: u64, label: &str) -> ChaCha8Rng {
    let digest = Sha256::digest(label.as_bytes());
    let mut stream = [0u8; 8];
    stream.copy_from_slice(&digest[..8]);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(u64::from_le_bytes(stream));
    rng
}

/// Lower Cholesky factor of the `n_t x n_t` correlation matrix `exp(-|t - t'| / xi)`
/// (the identity for `xi = 0`).
pub fn time_correlation_factor(n_t: usize, xi: f64) -> DMatrix<f64> {
    // exp(-|t - t'| / xi) = r^|t - t'| with r = e^{-1/xi} < 1 is the AR(1) (Kac–Murdock–Szegő)
    // correlation matrix, positive definite for every n_t. Its Cholesky factor has a closed
    // form, so no fallible factorisation is needed: row t is (r^t, r^{t-1} s, ..., r s, s) with
    // s = sqrt(1 - r^2).
    let r = if xi > 0.0 { (-1.0 / xi).exp() } else { 0.0 };
    let s = (1.0 - r * r).sqrt();
    DMatrix::from_fn(n_t, n_t, |t, k| {
        if k > t {
            0.0
        } else if k == 0 {
            r.powi(t as i32)
        } else {
            s * r.powi((t - k) as i32)
        }
    })
}

/// Unit-variance noise for one channel, time-major like [`crate::data::Series`]
/// (`[t * n_cfg + cfg]`): correlated across time through `factor` (from
/// [`time_correlation_factor`]) and AR(1) with coefficient `rho` across configurations.
pub fn unit_noise(rng: &mut ChaCha8Rng, factor: &DMatrix<f64>, n_cfg: usize, rho: f64) -> Vec<f64> {
    let n_t = factor.nrows();
    let normal = Normal::standard();
    let innovation = (1.0 - rho * rho).sqrt();
    let mut out = vec![0.0; n_t * n_cfg];
    let mut previous: Option<Vec<f64>> = None;
    for cfg in 0..n_cfg {
        let z: Vec<f64> = (0..n_t).map(|_| rand::Rng::sample(rng, normal)).collect();
        let w: Vec<f64> = (0..n_t)
            .map(|t| (0..=t).map(|k| factor[(t, k)] * z[k]).sum())
            .collect();
        let eta: Vec<f64> = match &previous {
            None => w,
            Some(prev) => prev
                .iter()
                .zip(&w)
                .map(|(p, w)| rho * p + innovation * w)
                .collect(),
        };
        for (t, e) in eta.iter().enumerate() {
            out[t * n_cfg + cfg] = *e;
        }
        previous = Some(eta);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    // The closed-form Cholesky factor of the AR(1) correlation matrix reproduces it
    // (L L^T = R, textbook identity for the Kac–Murdock–Szegő matrix).
    #[test]
    fn factor_reproduces_correlation() {
        let xi = 2.5;
        let l = time_correlation_factor(6, xi);
        let r = &l * l.transpose();
        for i in 0..6usize {
            for j in 0..6 {
                let want = (-(i.abs_diff(j) as f64) / xi).exp();
                assert_relative_eq!(r[(i, j)], want, epsilon = 1e-12);
            }
        }
    }

    // Sample statistics of a long chain: unit variance, time correlation exp(-1/xi) at
    // distance 1, lag-1 autocorrelation rho (analytic values of the construction).
    #[test]
    fn moments_of_the_noise() {
        let (xi, rho, n_cfg) = (1.5, 0.4, 40_000);
        let mut rng = channel_rng(7, "test");
        let eta = unit_noise(&mut rng, &time_correlation_factor(2, xi), n_cfg, rho);
        let (a, b) = eta.split_at(n_cfg);
        let mean = |x: &[f64]| x.iter().sum::<f64>() / x.len() as f64;
        let var_a = a.iter().map(|x| x * x).sum::<f64>() / n_cfg as f64 - mean(a).powi(2);
        let cross = a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>() / n_cfg as f64;
        let lag1 = a.windows(2).map(|w| w[0] * w[1]).sum::<f64>() / (n_cfg - 1) as f64;
        // AR(1) chain of 4e4 with rho 0.4: standard errors about 0.01.
        assert_relative_eq!(var_a, 1.0, epsilon = 0.04);
        assert_relative_eq!(cross, (-1.0 / xi).exp(), epsilon = 0.04);
        assert_relative_eq!(lag1, rho, epsilon = 0.04);
    }

    // Streams named differently differ; the same name repeats exactly.
    #[test]
    fn streams_by_label() {
        use rand::RngCore;
        let a = channel_rng(1, "x").next_u64();
        assert_eq!(a, channel_rng(1, "x").next_u64());
        assert_ne!(a, channel_rng(1, "y").next_u64());
        assert_ne!(a, channel_rng(2, "x").next_u64());
    }
}

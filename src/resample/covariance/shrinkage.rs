//! Shrinkage of a sample covariance (Ledoit & Wolf, J. Multivariate Anal. 88 (2004) 365):
//! the optimal intensities toward the diagonal target (the correlation matrix shrunk toward
//! the identity) and toward the scaled identity, and the shrunk matrix.

use super::options::ShrinkageTarget;
use crate::{Error, Result};
use nalgebra::DMatrix;

/// `(1-λ) C + λ F` for `target`, with `intensity` fixed or (`None`) the Ledoit–Wolf optimum
/// from the deviations `y`; returns the matrix and `λ`.
pub(super) fn shrink(
    full: DMatrix<f64>,
    y: &DMatrix<f64>,
    target: ShrinkageTarget,
    intensity: Option<f64>,
    noise_scale: f64,
) -> Result<(DMatrix<f64>, f64)> {
    let d = full.nrows();
    let lambda = match intensity {
        Some(l) if (0.0..=1.0).contains(&l) => l,
        Some(l) => {
            return Err(Error::analysis(
                "covariance",
                format!("shrinkage intensity {l}; expected a number from 0 to 1"),
            ))
        }
        None => match target {
            ShrinkageTarget::Diagonal => diagonal_target_intensity(y, noise_scale),
            ShrinkageTarget::Identity => identity_target_intensity(y, noise_scale),
        },
    };
    let m = match target {
        ShrinkageTarget::Diagonal => {
            let mut m = full.clone() * (1.0 - lambda);
            m.set_diagonal(&full.diagonal());
            m
        }
        ShrinkageTarget::Identity => {
            let mu = full.trace() / d as f64;
            full * (1.0 - lambda) + DMatrix::identity(d, d) * (lambda * mu)
        }
    };
    Ok((m, lambda))
}

/// Ledoit–Wolf intensity for shrinking the correlation matrix toward the identity.
fn diagonal_target_intensity(y: &DMatrix<f64>, noise_scale: f64) -> f64 {
    let (n, d) = y.shape();
    let nf = n as f64;
    let sd: Vec<f64> = (0..d)
        .map(|i| (y.column(i).norm_squared() / nf).sqrt())
        .collect();
    let z = DMatrix::from_fn(n, d, |k, i| y[(k, i)] / sd[i]);
    let r = z.transpose() * &z / nf;
    let (mut noise, mut signal) = (0.0, 0.0);
    for i in 0..d {
        for j in 0..d {
            if i == j {
                continue;
            }
            let var: f64 = (0..n)
                .map(|k| (z[(k, i)] * z[(k, j)] - r[(i, j)]).powi(2))
                .sum::<f64>()
                / (nf * nf);
            noise += var * noise_scale;
            signal += r[(i, j)].powi(2);
        }
    }
    ratio_intensity(noise, signal)
}

/// Ledoit–Wolf (2004) intensity for shrinking toward the scaled identity.
fn identity_target_intensity(y: &DMatrix<f64>, noise_scale: f64) -> f64 {
    let (n, d) = y.shape();
    let nf = n as f64;
    let s = y.transpose() * y / nf;
    let mu = s.trace() / d as f64;
    let delta2 = (&s - DMatrix::identity(d, d) * mu).norm_squared();
    let mut b2 = 0.0;
    for k in 0..n {
        let row = y.row(k);
        for i in 0..d {
            for j in 0..d {
                b2 += (row[i] * row[j] - s[(i, j)]).powi(2);
            }
        }
    }
    b2 *= noise_scale / (nf * nf);
    ratio_intensity(b2.min(delta2), delta2)
}

/// `noise / signal` clipped to [0, 1]; no signal to keep means full shrinkage.
fn ratio_intensity(noise: f64, signal: f64) -> f64 {
    if signal > 0.0 {
        (noise / signal).clamp(0.0, 1.0)
    } else if noise > 0.0 {
        1.0
    } else {
        0.0
    }
}

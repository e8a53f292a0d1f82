//! Plateau fits (docs/methods.md §4): the ratio at one `tsep` fitted to a constant over
//! `tau in [tau_cut, tsep - tau_cut]`, correlated, in closed form `c = 1^T W y / 1^T W 1` with
//! `W` the inverse covariance frozen from the resamples (common practice).

use super::lsq::{fit_re_im, Design};
use super::{ChannelRatio, RatioSettings, ReImFit, STAGE};
use crate::{Error, Result};
use nalgebra::DMatrix;
use serde::Serialize;

/// The plateau of one channel at one separation.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PlateauFit {
    /// Source–sink separation.
    pub tsep: u32,
    /// First and last insertion time fitted.
    pub tau_range: (u32, u32),
    /// The constant with its fit quality.
    pub fit: ReImFit,
}

/// Fit the plateau of `ratio` at `tsep`.
pub fn plateau(ratio: &ChannelRatio, tsep: u32, settings: &RatioSettings) -> Result<PlateauFit> {
    let points = ratio.fit_points(tsep, settings.tau_cut);
    let (first, last) = match (points.first(), points.last()) {
        (Some(a), Some(b)) => (a.tau, b.tau),
        _ => {
            return Err(Error::analysis(
                STAGE,
                format!(
                    "channel {}, tsep {tsep}: no ratio points with {} <= tau <= tsep - {}; lower \
                     tau_cut or use a larger tsep",
                    ratio.key, settings.tau_cut, settings.tau_cut
                ),
            ))
        }
    };
    let values: Vec<_> = points.iter().map(|p| &p.value).collect();
    let n = values.len();
    let what = format!("plateau of channel {}, tsep {tsep}", ratio.key);
    let cached: Vec<_> = points.iter().map(|p| &p.kept).collect();
    let (_, fit) = fit_re_im(
        &values,
        Some(&cached),
        Design::Fixed(DMatrix::from_element(n, 1, 1.0)),
        ratio.covariance(settings),
        &what,
    )?;
    Ok(PlateauFit {
        tsep,
        tau_range: (first, last),
        fit,
    })
}

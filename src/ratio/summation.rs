//! The summation method (Maiani et al., Nucl. Phys. B 293 (1987) 420; Capitani et al.,
//! Phys. Rev. D 86 (2012) 074502): `S(tsep) = sum_{tau = tau_cut}^{tsep - tau_cut} R(tsep, tau)`
//! behaves as `c + tsep * M + O(tsep e^{-Delta tsep})`, so a straight line in `tsep` over
//! `tsep >= tsep_min` has the matrix element `M` as its slope. Excited states are suppressed by
//! `e^{-Delta tsep}` rather than the plateau's `e^{-Delta tsep / 2}`. The line fit is correlated
//! across `tsep` (the sums share configurations), covariance frozen from the resamples.

use super::lsq::{fit_re_im, Design};
use super::{ChannelRatio, RatioSettings, ReIm, ReImFit, STAGE};
use crate::{Error, Result};
use nalgebra::DMatrix;
use serde::Serialize;

/// The summation estimate of one channel.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SummationFit {
    /// The separations used, ascending.
    pub tseps: Vec<u32>,
    /// `S(tsep)` at each of them.
    pub sums: Vec<ReIm>,
    /// The slope: the matrix element, with the fit quality of the line.
    pub slope: ReImFit,
    /// The intercept `c`.
    pub intercept: ReIm,
}

/// The summed ratio at every `tsep >= settings.summation_tsep_min` whose `tau_cut` window is
/// complete (every `tau` present), then the line fit. Fewer than two separations is an error.
pub fn summation(ratio: &ChannelRatio, settings: &RatioSettings) -> Result<SummationFit> {
    let mut tseps = Vec::new();
    let mut sums = Vec::new();
    for tsep in ratio.tseps() {
        if tsep < settings.summation_tsep_min {
            continue;
        }
        let points = ratio.fit_points(tsep, settings.tau_cut);
        // A window with a dropped point (negative-root policy) would sum fewer terms and
        // break the linear behaviour in tsep: such a separation is left out.
        let full = (tsep + 1).saturating_sub(2 * settings.tau_cut) as usize;
        let Some(first) = points.first().filter(|_| points.len() == full) else {
            continue;
        };
        let mut re = first.value.re.clone();
        let mut im = first.value.im.clone();
        for p in &points[1..] {
            re = &re + &p.value.re;
            im = &im + &p.value.im;
        }
        tseps.push(tsep);
        sums.push(ReIm { re, im });
    }
    if tseps.len() < 2 {
        return Err(Error::analysis(
            STAGE,
            format!(
                "summation for channel {}: {} usable source-sink separation(s) ({:?}) with \
                 tsep >= {} and a complete window for tau_cut = {}; the line fit needs at least two",
                ratio.key,
                tseps.len(),
                tseps,
                settings.summation_tsep_min,
                settings.tau_cut
            ),
        ));
    }
    let n = tseps.len();
    let design = DMatrix::from_fn(n, 2, |i, j| if j == 0 { 1.0 } else { tseps[i] as f64 });
    let refs: Vec<&ReIm> = sums.iter().collect();
    let what = format!("summation for channel {}", ratio.key);
    let (params, mut slope) = fit_re_im(
        &refs,
        None,
        Design::Fixed(design),
        ratio.covariance(settings),
        &what,
    )?;
    let mut params = params.into_iter();
    let missing = || Error::analysis(STAGE, format!("{what}: the line fit returned no slope"));
    let intercept = params.next().ok_or_else(missing)?;
    slope.value = params.next().ok_or_else(missing)?;
    Ok(SummationFit {
        tseps,
        sums,
        slope,
        intercept,
    })
}

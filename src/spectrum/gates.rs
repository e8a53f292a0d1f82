//! Sanity gates on the fitted spectrum and the stage's warnings said once per kind.
//!
//! A rest-frame energy that is not positive stops the run (nothing downstream can use it);
//! a moving-frame energy below the mass (the rest-frame energy, or the mass from a twisted
//! rest frame) by more than [`MAX_SIGMA_BELOW_REST`] errors of the resampled difference cannot
//! be a ground state (`E(p) = sqrt(m^2 + p^2) >= m` for any dispersion relation), so that
//! momentum is dropped with the fit that produced it, and the later stages skip the channels
//! that need it.

use super::MomentumSpectrum;
use crate::data::Momentum;
use crate::error::{Error, Result};
use crate::resample::Resampled;
use std::collections::BTreeMap;

/// How far (in errors of the difference) `E(p)` may fall below `E(0)` before it is refused.
pub const MAX_SIGMA_BELOW_REST: f64 = 2.0;

fn fmt_p(p: Momentum) -> String {
    format!("({},{},{})", p[0], p[1], p[2])
}

fn fit_of(s: &MomentumSpectrum) -> String {
    format!(
        "model average, highest weight t_min = {}, t_max = {}, {} state(s)",
        s.chosen.t_min, s.chosen.t_max, s.chosen.n_states
    )
}

/// The rest-frame gate: an error for `E(0) <= 0` (or NaN).
pub fn check_rest(per_momentum: &BTreeMap<Momentum, MomentumSpectrum>) -> Result<()> {
    let Some(s) = per_momentum.get(&[0, 0, 0]) else {
        return Ok(());
    };
    let rest = &s.energies[0];
    if rest.central.is_nan() || rest.central <= 0.0 {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "momentum (0,0,0): the ground-state energy {:.4} is not positive ({}); check the \
                 sign convention of the data or the fit range",
                rest.central,
                fit_of(s)
            ),
        ));
    }
    Ok(())
}

/// The `E(p) >= m` gate: momenta whose ground energy lies below `mass` by more than
/// [`MAX_SIGMA_BELOW_REST`] errors of the difference move to `dropped`. `reference` names the
/// mass in the reason (`E(0)` when it is the untwisted rest energy).
pub fn drop_below(
    per_momentum: &mut BTreeMap<Momentum, MomentumSpectrum>,
    dropped: &mut Vec<(Momentum, String)>,
    mass: &Resampled,
    reference: &str,
) {
    let below: Vec<(Momentum, String)> = per_momentum
        .iter()
        .filter(|(p, _)| **p != [0, 0, 0])
        .filter_map(|(p, s)| {
            let e = &s.energies[0];
            let d = e.try_zip_map(mass, "E(p) - m", |a, b| a - b).ok()?;
            let sigma = d.error();
            (d.central < -MAX_SIGMA_BELOW_REST * sigma || !e.central.is_finite()).then(|| {
                (
                    *p,
                    format!(
                        "E{} = {:.4}({:.4}) lies below {reference} = {:.4} by {:.1} sigma ({})",
                        fmt_p(*p),
                        e.central,
                        e.error(),
                        mass.central,
                        -d.central / sigma,
                        fit_of(s)
                    ),
                )
            })
        })
        .collect();
    for (p, why) in below {
        per_momentum.remove(&p);
        dropped.push((p, why));
    }
}

/// One warning per kind, naming the momenta it concerns.
pub fn summarise(
    per_momentum: &BTreeMap<Momentum, MomentumSpectrum>,
    dropped: &[(Momentum, String)],
    warnings: &mut Vec<String>,
) {
    let list = |ps: Vec<Momentum>| ps.into_iter().map(fmt_p).collect::<Vec<_>>().join(" ");
    let small: Vec<Momentum> = per_momentum
        .iter()
        .filter(|(_, s)| s.small_sample)
        .map(|(p, _)| *p)
        .collect();
    let (uncorrelated, small): (Vec<Momentum>, Vec<Momentum>) = small
        .into_iter()
        .partition(|p| per_momentum[p].uncorrelated);
    if !uncorrelated.is_empty() {
        warnings.push(format!(
            "fewer than five resamples per fitted time slice at momenta {}: diagonal weights \
             (uncorrelated fits) instead of a full covariance; set spectrum.covariance to choose",
            list(uncorrelated)
        ));
    }
    if !small.is_empty() {
        warnings.push(format!(
            "fewer than five resamples per fitted time slice at momenta {}: the inverse covariance \
             is biased (Hartlap et al. 2007); consider fewer points or shrinkage",
            list(small)
        ));
    }
    for (p, s) in per_momentum {
        if let Some(note) = &s.t_max_note {
            warnings.push(format!(
                "momentum {}: fits end at t_max = {} because {note}",
                fmt_p(*p),
                s.t_max
            ));
        }
    }
    let excluded: Vec<String> = per_momentum
        .iter()
        .filter_map(|(p, s)| {
            let n = s
                .average
                .table
                .iter()
                .filter(|r| r.excluded.is_some())
                .count();
            (n > 0).then(|| format!("{} ({n})", fmt_p(*p)))
        })
        .collect();
    if !excluded.is_empty() {
        warnings.push(format!(
            "fit windows left out of the model average as unphysical or unresolved (reasons in \
             spectrum_fits.csv), per momentum: {}",
            excluded.join(" ")
        ));
    }
    let all_out: Vec<Momentum> = per_momentum
        .iter()
        .filter(|(_, s)| s.average.table.iter().all(|r| r.excluded.is_some()))
        .map(|(p, _)| *p)
        .collect();
    if !all_out.is_empty() {
        warnings.push(format!(
            "every fit window is unphysical or unresolved at momenta {}; their average uses all \
             windows and is suspect",
            list(all_out)
        ));
    }
    for (p, why) in dropped {
        warnings.push(format!(
            "momentum {} dropped, its channels skipped by later stages: {why}",
            fmt_p(*p)
        ));
    }
}

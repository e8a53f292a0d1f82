//! Two-point spectroscopy (docs/methods.md §2): energies and overlaps at every momentum from
//! correlated multi-exponential fits with Gaussian priors (Lepage et al., Nucl. Phys. Proc.
//! Suppl. 106 (2002) 12), the fit window chosen by model averaging (Jay & Neil, Phys. Rev. D
//! 103 (2021) 114502), effective masses, the dispersion check and the variational method
//! (Blossier et al., JHEP 04 (2009) 094).
//!
//! # Stage output (consumed by the ratio and kinematics stages)
//!
//! [`run`] returns a [`SpectrumResult`]: one [`MomentumSpectrum`] per integer momentum plus
//! the mass (ground-state energy at zero momentum; with a twist there, the mass from it by the
//! inverted dispersion relation), the dispersion table and warnings. Every
//! number is a [`Resampled`] on the same resamples as the input plan, so later stages combine
//! them sample by sample. In a [`MomentumSpectrum`]:
//!
//! - `energies[0]`, `amplitudes[0]`: the model-averaged ground state (or, at non-zero
//!   momentum, the dispersion energy when the settings ask for it); `energies[n >= 1]`,
//!   `amplitudes[n >= 1]`: the excited states of the highest-weight fit.
//! - `chosen`: the highest-weight fit (window, states, chi2/dof, p, its own energies and
//!   amplitudes); `excited`: the highest-weight fit with at least two states (shown in the
//!   tables, and the fallback of [`MomentumSpectrum::gap`] and
//!   [`MomentumSpectrum::amplitude_ratio`] when no multi-state fit is included).
//! - `average`: the full model-average table (every `t_min` × number of states with weights)
//!   and `average.excited`, the first excited state averaged over the included multi-state
//!   fits: the source of [`MomentumSpectrum::gap`] and [`MomentumSpectrum::amplitude_ratio`]
//!   (each fit's own difference and ratio averaged, so `a = A1/A0` and `Delta = E1 - E0` stay
//!   mutually consistent, as the two-state ratio fit needs).
//!
//! The amplitudes are those of `C(t) = sum_n A_n e^{-E_n t}` (periodic form: times
//! `e^{-E t} + e^{-E (T - t)}`), i.e. `|Z_n|^2 / (2 E_n)` in the usual normalisation.
//!
//! # Performance
//!
//! Every resample's fit starts from the central fit's parameters and reuses the window's
//! whitening matrix (built once from the frozen covariance); the model advances `e^{-E t}` by
//! one multiplication per time slice; resample fits skip the covariance SVD. Measured with
//! `cargo bench --bench spectrum` (2026-12-02) on the shared 2-core development machine while
//! other jobs ran, so wall times are indicative only; instruction counts
//! (`valgrind --tool=callgrind`) are reproducible. Whole stage, 10 momenta × 1000 jackknife
//! samples × 10 fits per momentum (100 100 fits): 10.95 -> 7.03 billion instructions (109k ->
//! 70k per fit, -36%), wall 2.50 -> 1.93 s on 1 thread and 2.24 -> 1.79 s on 2 threads. One
//! 2-state fit to 15 points from a poor start at the stage tolerances (covariance included):
//! 297k -> 253k instructions, 69 -> 61 µs. The Moré
//! Levenberg–Marquardt steps of the `levenberg-marquardt` crate (pivoted QR, allocations) are
//! now the largest cost; "well under a second" on this machine is not reached.

pub mod average;
mod correlator;
pub mod dispersion;
pub mod effective;
mod frames;
mod gates;
pub mod gevp;
pub mod model;
mod rest_mass;
pub mod settings;
mod window;

pub use average::{AverageRow, ExcitedAverage, ModelAverage};
pub use correlator::fit_correlator;
pub use dispersion::DispersionRow;
pub use settings::{
    GevpSettings, GevpSolutionKind, IntRange, PriorFrames, PriorSettings, SpectrumSettings,
};
pub use window::WindowFit;

use crate::data::{Momentum, Series, TwoPointData};
use crate::error::{Error, Result};
use crate::resample::{ResamplePlan, Resampled, Scheme};
use rayon::prelude::*;
use serde::Serialize;
use std::collections::BTreeMap;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Summary of one fit singled out from the model average.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ChosenFit {
    /// First time slice.
    pub t_min: usize,
    /// Last time slice.
    pub t_max: usize,
    /// Number of states.
    pub n_states: usize,
    /// chi2 / dof of the central fit.
    pub chi2_per_dof: f64,
    /// p-value of the central fit.
    pub p_value: f64,
    /// Model weight.
    pub weight: f64,
    /// Energies of this fit.
    pub energies: Vec<Resampled>,
    /// Amplitudes of this fit.
    pub amplitudes: Vec<Resampled>,
}

/// The spectrum at one momentum.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct MomentumSpectrum {
    /// Integer momentum (units of `2 pi / L`).
    pub momentum: Momentum,
    /// Energies, ground first (see the module docs for where each comes from).
    pub energies: Vec<Resampled>,
    /// Amplitudes, ground first.
    pub amplitudes: Vec<Resampled>,
    /// The highest-weight fit.
    pub chosen: ChosenFit,
    /// The highest-weight fit with at least two states, if any was made.
    pub excited: Option<ChosenFit>,
    /// The model average and its table.
    pub average: ModelAverage,
    /// Effective mass `m(t)` (log form, or cosh form for periodic data); `None` where
    /// undefined.
    pub effective_mass: Vec<Option<Resampled>>,
    /// Last time slice of the fits at this momentum.
    pub t_max: usize,
    /// Why `t_max` is below the configured one (the signal died), if it is.
    pub t_max_note: Option<String>,
    /// Fewer than five resamples per point of the widest window (Hartlap bias).
    pub small_sample: bool,
    /// The covariance was left to the stage and `small_sample` made it diagonal.
    pub uncorrelated: bool,
}

impl MomentumSpectrum {
    /// Ground-state energy.
    pub fn ground_energy(&self) -> &Resampled {
        &self.energies[0]
    }

    /// `E_1 - E_0`: the model average over the included multi-state fits
    /// ([`average::ExcitedAverage`]); when none is included, that of the fallback fit in
    /// `excited` (a physical but unresolved multi-state fit).
    pub fn gap(&self) -> Option<Resampled> {
        if let Some(x) = &self.average.excited {
            return Some(x.gap.clone());
        }
        let f = self.excited.as_ref()?;
        Some(&f.energies[1] - &f.energies[0])
    }

    /// `A_1 / A_0`, from the same source as [`Self::gap`].
    pub fn amplitude_ratio(&self) -> Option<Resampled> {
        if let Some(x) = &self.average.excited {
            return Some(x.amplitude_ratio.clone());
        }
        let f = self.excited.as_ref()?;
        Some(&f.amplitudes[1] / &f.amplitudes[0])
    }
}

/// The output of the spectrum stage.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SpectrumResult {
    /// Spectrum at every momentum in the data.
    pub per_momentum: BTreeMap<Momentum, MomentumSpectrum>,
    /// The hadron mass, when the data have `n = (0,0,0)`: the model-averaged ground energy
    /// there, or, when that two-point function carries a twist, the mass from it by the
    /// inverted dispersion relation (`SpectrumSettings::mass_dispersion`), per resample.
    pub mass: Option<Resampled>,
    /// Dispersion check at every non-zero integer momentum, each at the twisted lattice
    /// momentum of its two-point function (needs `l_extent` and `n = 0`).
    pub dispersion: Vec<DispersionRow>,
    /// Momenta that could not be fitted or failed a sanity gate, with the reason; later
    /// stages skip every channel that needs them.
    pub dropped: Vec<(Momentum, String)>,
    /// How the ground-energy prior was applied at moving frames (`None`: no such prior).
    pub prior_note: Option<String>,
    /// Everything a user should know (dropped windows, failed resample fits, small samples),
    /// one line per kind with the momenta it concerns.
    pub warnings: Vec<String>,
}

fn label(p: Momentum) -> String {
    format!("momentum ({},{},{})", p[0], p[1], p[2])
}

fn check_settings(s: &SpectrumSettings) -> Result<()> {
    s.validate()
        .map_err(|e| Error::config(format!("spectrum.{}: {}", e.key, e.message)))
}

/// The correlator channel per momentum, honouring `settings.smear`.
fn select_channels<'a>(
    data: &'a TwoPointData,
    smear: Option<&str>,
) -> Result<BTreeMap<Momentum, &'a crate::data::Series>> {
    let mut out = BTreeMap::new();
    for (key, series) in &data.channels {
        if smear.is_some() && key.smear.as_deref() != smear {
            continue;
        }
        if out.insert(key.momentum, series).is_some() {
            return Err(Error::config(format!(
                "spectrum: several two-point channels at {}; set `smear` to the interpolator to fit",
                label(key.momentum)
            )));
        }
    }
    if out.is_empty() {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "no two-point channels{}",
                smear.map_or(String::new(), |s| format!(" with smear `{s}`"))
            ),
        ));
    }
    Ok(out)
}

/// Resample every time slice of a series with `plan`.
pub fn resample_series(
    series: &crate::data::Series,
    plan: &ResamplePlan,
) -> Result<Vec<Resampled>> {
    if series.n_cfg != plan.n_bins() {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "the resample plan expects {} bins but the two-point data have {}",
                plan.n_bins(),
                series.n_cfg
            ),
        ));
    }
    Ok((0..series.n_t)
        .map(|t| plan.mean(series.re_at(t)))
        .collect())
}

/// One momentum's fits: its resamples (an error there ends the stage), then
/// [`fit_correlator`] with the first-gap prior carried from the rest frame's spectrum
/// `rest_gap`, and the warnings it gave.
fn fit_momentum(
    p: Momentum,
    series: &Series,
    plan: &ResamplePlan,
    settings: &SpectrumSettings,
    rest_gap: Option<&frames::RestGap>,
) -> Result<(Result<MomentumSpectrum>, Vec<String>)> {
    let corr = resample_series(series, plan)?;
    // A jackknife run is its own weighting; a bootstrap run adds a jackknife over the bins.
    let jackknife = match plan.scheme() {
        Scheme::Jackknife => None,
        Scheme::Bootstrap => Some(resample_series(
            series,
            &ResamplePlan::jackknife(plan.n_bins()),
        )?),
    };
    let weighting = jackknife.as_deref().unwrap_or(&corr);
    // Every resample's fit weights its points by the spread of its own bins.
    let scales: Vec<Vec<f64>> = (0..series.n_t)
        .map(|t| plan.sample_error_scales(series.re_at(t)))
        .collect();
    let mut local = frames::momentum_settings(p, settings);
    if let (Some(rest), Some(width)) = (rest_gap, settings.rest_frame_gap_width) {
        local.priors.first_log_gap = frames::carried_gap_prior(p, rest, width, settings);
    }
    let mut warnings = Vec::new();
    let fitted = fit_correlator(p, &corr, weighting, Some(&scales), &local, &mut warnings);
    Ok((fitted, warnings))
}

/// The spectrum stage: fit every momentum of `data` (already binned) on the resamples of
/// `plan`, then the dispersion check and, if asked, dispersion energies.
pub fn run(
    data: &TwoPointData,
    plan: &ResamplePlan,
    settings: &SpectrumSettings,
) -> Result<SpectrumResult> {
    run_with_progress(data, plan, settings, &|_, _| {})
}

/// [`run`], calling `progress(done, total)` after each momentum's fits (for a progress
/// display; the result does not depend on it).
pub fn run_with_progress(
    data: &TwoPointData,
    plan: &ResamplePlan,
    settings: &SpectrumSettings,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<SpectrumResult> {
    check_settings(settings)?;
    let mut warnings = Vec::new();
    let mut per_momentum = BTreeMap::new();
    let mut dropped = Vec::new();
    let channels = select_channels(data, settings.smear.as_deref())?;
    let total = channels.len();
    let done = AtomicUsize::new(0);
    let fit = |p: Momentum, series: &Series, rest_gap: Option<&frames::RestGap>| {
        let out = fit_momentum(p, series, plan, settings, rest_gap);
        progress(done.fetch_add(1, Ordering::Relaxed) + 1, total);
        out
    };
    progress(0, total);
    // The rest frame first: its spectrum gives the moving frames their first-gap prior. The
    // moving frames then run side by side and are taken in momentum order, so the result
    // (warnings and their order included) is that of fitting them one after another.
    let mut rest_gap = None;
    if let Some(series) = channels.get(&rest_mass::REST) {
        let (fitted, notes) = fit(rest_mass::REST, series, None)?;
        warnings.extend(notes);
        let s = fitted?;
        rest_gap = frames::rest_gap(&s);
        per_momentum.insert(rest_mass::REST, s);
    }
    let moving: Vec<(Momentum, &Series)> = channels
        .iter()
        .filter(|(p, _)| **p != rest_mass::REST)
        .map(|(p, s)| (*p, *s))
        .collect();
    let fitted: Vec<_> = moving
        .par_iter()
        .map(|&(p, series)| fit(p, series, rest_gap.as_ref()))
        .collect();
    for ((p, _), outcome) in moving.iter().zip(fitted) {
        let (fitted, notes) = outcome?;
        warnings.extend(notes);
        match fitted {
            Ok(s) => {
                per_momentum.insert(*p, s);
            }
            Err(e) => dropped.push((*p, e.to_string())),
        }
    }
    let notes = [
        frames::prior_frames_note(settings),
        frames::gap_prior_note(rest_gap.as_ref(), settings),
    ];
    let notes: Vec<String> = notes.into_iter().flatten().collect();
    let prior_note = (!notes.is_empty()).then(|| notes.join("; "));
    gates::check_rest(&per_momentum)?;
    let mass = match per_momentum.get(&rest_mass::REST) {
        Some(s) => {
            let (mass, note) = rest_mass::mass(&s.energies[0], settings)?;
            warnings.extend(note);
            Some(mass)
        }
        None => None,
    };
    if let Some(m) = &mass {
        let reference = match rest_mass::twisted_rest(settings) {
            Some(_) => "the mass m",
            None => "E(0)",
        };
        gates::drop_below(&mut per_momentum, &mut dropped, m, reference);
    }
    gates::summarise(&per_momentum, &dropped, &mut warnings);
    let mut dispersion = Vec::new();
    match (settings.l_extent, &mass) {
        (Some(_), Some(m)) => {
            for (p, s) in per_momentum.iter().filter(|(p, _)| **p != rest_mass::REST) {
                if let Some(pl) = settings.lattice_momentum(*p) {
                    dispersion.push(dispersion::check(*p, pl, &s.energies[0], m));
                }
            }
        }
        (None, _) => warnings.push("no dispersion check: `l_extent` (L) is not set".into()),
        (_, None) => warnings.push("no dispersion check: no data at momentum (0,0,0)".into()),
    }
    Ok(SpectrumResult {
        per_momentum,
        mass,
        dispersion,
        dropped,
        prior_note,
        warnings,
    })
}

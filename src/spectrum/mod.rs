//! Two-point spectroscopy (docs/methods.md §2): energies and overlaps at every momentum from
//! correlated multi-exponential fits with Gaussian priors (Lepage et al., Nucl. Phys. Proc.
//! Suppl. 106 (2002) 12), the fit window chosen by model averaging (Jay & Neil, Phys. Rev. D
//! 103 (2021) 114502), effective masses, the dispersion check and the variational method
//! (Blossier et al., JHEP 04 (2009) 094).
//!
//! # Stage output (consumed by the ratio and kinematics stages)
//!
//! [`run`] returns a [`SpectrumResult`]: one [`MomentumSpectrum`] per integer momentum plus
//! the mass (ground-state energy at zero momentum), the dispersion table and warnings. Every
//! number is a [`Resampled`] on the same resamples as the input plan, so later stages combine
//! them sample by sample. In a [`MomentumSpectrum`]:
//!
//! - `energies[0]`, `amplitudes[0]`: the model-averaged ground state (or, at non-zero
//!   momentum, the dispersion energy when the settings ask for it); `energies[n >= 1]`,
//!   `amplitudes[n >= 1]`: the excited states of the highest-weight fit.
//! - `chosen`: the highest-weight fit (window, states, chi2/dof, p, its own energies and
//!   amplitudes); `excited`: the highest-weight fit with at least two states, the source of
//!   [`MomentumSpectrum::gap`] and [`MomentumSpectrum::amplitude_ratio`] (both from one fit, so
//!   `a = A1/A0` and `Delta = E1 - E0` are mutually consistent, as the two-state ratio fit
//!   needs).
//! - `average`: the full model-average table (every `t_min` × number of states with weights).
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
pub mod dispersion;
pub mod effective;
mod frames;
mod gates;
pub mod gevp;
pub mod model;
pub mod settings;
mod window;

pub use average::{AverageRow, ModelAverage};
pub use dispersion::DispersionRow;
pub use settings::{
    GevpSettings, GevpSolutionKind, IntRange, PriorFrames, PriorSettings, SpectrumSettings,
};
pub use window::WindowFit;

use crate::data::{Momentum, TwoPointData};
use crate::error::{Error, Result};
use crate::fit::Weights;
use crate::resample::{covariance, ResamplePlan, Resampled};
use effective::{effective_mass, EffectiveMassKind};
use model::Form;
use serde::Serialize;
use std::collections::BTreeMap;
use window::{fit_window, WindowSpec};

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

    /// `E_1 - E_0` of the best multi-state fit.
    pub fn gap(&self) -> Option<Resampled> {
        let f = self.excited.as_ref()?;
        Some(&f.energies[1] - &f.energies[0])
    }

    /// `A_1 / A_0` of the best multi-state fit.
    pub fn amplitude_ratio(&self) -> Option<Resampled> {
        let f = self.excited.as_ref()?;
        Some(&f.amplitudes[1] / &f.amplitudes[0])
    }
}

/// The output of the spectrum stage.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SpectrumResult {
    /// Spectrum at every momentum in the data.
    pub per_momentum: BTreeMap<Momentum, MomentumSpectrum>,
    /// Ground-state energy at zero momentum (model-averaged), when the data have `p = 0`.
    pub mass: Option<Resampled>,
    /// Dispersion check at every non-zero momentum (needs `l_extent` and `p = 0`).
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

/// Fit one resampled correlator: every `t_min` in range times every number of states, the
/// model average, the chosen fits and the effective mass.
pub fn fit_correlator(
    momentum: Momentum,
    corr: &[Resampled],
    settings: &SpectrumSettings,
    warnings: &mut Vec<String>,
) -> Result<MomentumSpectrum> {
    check_settings(settings)?;
    let name = label(momentum);
    check_correlator(&name, corr)?;
    let n_t = corr.len();
    let t_extent = settings.t_extent.unwrap_or(n_t) as f64;
    let form = if settings.periodic {
        Form::Periodic { t_extent }
    } else {
        Form::Exponential
    };
    let (t_max, t_max_note) = fit_t_max(&name, momentum, corr, settings)?;
    let spec = WindowSpec {
        corr,
        form,
        priors: &settings.priors,
        fit: &settings.fit,
        label: &name,
    };
    let n_samples = corr.first().map_or(0, Resampled::len);
    let widest = (t_max + 1).saturating_sub(settings.t_min.from);
    // Said once for all momenta by the caller (see `run`).
    let small_sample = n_samples < 5 * widest;
    // Automatic choice: a full covariance needs several samples per point (Hartlap et al.
    // 2007); below that its noise biases the fits and hides their errors (measured in
    // tests/spectrum_closure.rs), so the weights become diagonal.
    let uncorrelated = settings.covariance.is_none() && small_sample;
    let cov_options = settings.covariance.unwrap_or(if uncorrelated {
        covariance::CovarianceOptions {
            kind: covariance::CovarianceKind::Diagonal,
            eigen_cut: None,
        }
    } else {
        covariance::CovarianceOptions::default()
    });
    let fits = window_fits(&spec, settings, t_max, &cov_options, small_sample, warnings)?;
    let average = average::model_average(&fits, settings.t_min.from);
    let (chosen, excited) = choose_fits(&name, &fits, &average)?;
    let mut energies = chosen.energies.clone();
    let mut amplitudes = chosen.amplitudes.clone();
    energies[0] = average.energy.clone();
    amplitudes[0] = average.amplitude.clone();
    let kind = match form {
        Form::Exponential => EffectiveMassKind::Log,
        Form::Periodic { t_extent } => EffectiveMassKind::Cosh { t_extent },
    };
    Ok(MomentumSpectrum {
        momentum,
        energies,
        amplitudes,
        chosen,
        excited,
        average,
        effective_mass: effective_mass(corr, kind),
        t_max,
        t_max_note,
        small_sample,
        uncorrelated,
    })
}

/// At least three time slices, every value finite.
fn check_correlator(name: &str, corr: &[Resampled]) -> Result<()> {
    let n_t = corr.len();
    if n_t < 3 {
        return Err(Error::analysis(
            "spectrum",
            format!("{name}: {n_t} time slices; a two-point fit needs at least 3"),
        ));
    }
    if let Some(t) = corr.iter().position(|c| !c.is_finite()) {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "{name}: the correlator is not finite at t = {t} (central value or a resample)"
            ),
        ));
    }
    Ok(())
}

/// The end of every fit window: set per momentum, or where the signal is lost (with a note
/// saying why), capped by `t_max`; refused when no window is left or the correlator is not
/// positive inside it.
fn fit_t_max(
    name: &str,
    momentum: Momentum,
    corr: &[Resampled],
    settings: &SpectrumSettings,
) -> Result<(usize, Option<String>)> {
    let n_t = corr.len();
    let default_t_max = if settings.periodic {
        n_t / 2
    } else {
        n_t.saturating_sub(1)
    };
    let cap = settings
        .t_max
        .unwrap_or(default_t_max)
        .min(n_t.saturating_sub(1));
    let (t_max, t_max_note) = match settings
        .t_max_by_momentum
        .iter()
        .find(|(k, _)| settings::parse_momentum_key(k) == Some(momentum))
    {
        Some((_, &t)) => (t.min(n_t.saturating_sub(1)), None),
        None => frames::signal_t_max(corr, settings.t_min.from, cap, settings.max_relative_error),
    };
    if t_max < settings.t_min.from + 2 {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "{name}: no fit range left: {}; the fits need t_max >= t_min + 2 = {}",
                t_max_note.as_deref().unwrap_or("t_max too small"),
                settings.t_min.from + 2
            ),
        ));
    }
    if let Some(t) = (settings.t_min.from..=t_max).find(|&t| corr[t].central <= 0.0) {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "{name}: the correlator is {} at t = {t}, inside the fit range {}..={t_max}; \
                 expected positive values (lower t_max or check the sign convention)",
                corr[t].central, settings.t_min.from
            ),
        ));
    }
    Ok((t_max, t_max_note))
}

/// Every window `[t_min, t_max]` with every number of states, each window's covariance
/// estimated once; a fit that fails is dropped with a warning. Refused when none succeeds.
fn window_fits(
    spec: &WindowSpec,
    settings: &SpectrumSettings,
    t_max: usize,
    cov_options: &covariance::CovarianceOptions,
    small_sample: bool,
    warnings: &mut Vec<String>,
) -> Result<Vec<WindowFit>> {
    let (name, corr) = (spec.label, spec.corr);
    let n_samples = corr.first().map_or(0, Resampled::len);
    let mut fits = Vec::new();
    for t_min in settings.t_min.values().filter(|&t| t < t_max) {
        let window = &corr[t_min..=t_max];
        let in_window = |e: Error| {
            Error::analysis(
                "spectrum",
                format!("{name}, window [{t_min}, {t_max}]: {e}"),
            )
        };
        let cov = covariance::estimate(window, cov_options).map_err(in_window)?;
        // The small-sample (Hartlap) warning was given once for the momentum above; repeating
        // it for every window only buries the other warnings.
        for w in cov
            .warnings
            .iter()
            .filter(|w| !(small_sample && w.contains("Hartlap")))
        {
            warnings.push(format!("{name}, window [{t_min}, {t_max}]: {w}"));
        }
        let w = Weights::from_covariance(&cov.matrix).map_err(in_window)?;
        for n_states in settings.n_states.values() {
            match fit_window(spec, t_min, t_max, n_states, &w) {
                Ok(f) => {
                    if f.failed_samples > 0 {
                        warnings.push(format!(
                            "{name}, window [{t_min}, {t_max}], {n_states} states: {} of {n_samples} resample fits did not converge",
                            f.failed_samples
                        ));
                    }
                    fits.push(f);
                }
                Err(e) => warnings.push(format!("dropped from the model average: {e}")),
            }
        }
    }
    if fits.is_empty() {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "{name}: no fit in t_min {}..={} with t_max {t_max} and {}..={} states succeeded \
                 (see warnings); widen the window or fit fewer states",
                settings.t_min.from,
                settings.t_min.to,
                settings.n_states.from,
                settings.n_states.to
            ),
        ));
    }
    Ok(fits)
}

/// The highest-weight fit, and the highest-weight fit with at least two states.
fn choose_fits(
    name: &str,
    fits: &[WindowFit],
    average: &ModelAverage,
) -> Result<(ChosenFit, Option<ChosenFit>)> {
    let weights: Vec<f64> = average.table.iter().map(|r| r.weight).collect();
    // Included fits rank by weight. The excited-state parameters the ratio stage needs fall
    // back to the lowest-chi2 multi-state fit that is physical though unresolved (its
    // weight stays zero, so it never enters the averaged energy).
    let rank = |f: &WindowFit, w: f64| {
        if w > 0.0 {
            Some(w)
        } else if f.n_states > 1 && f.exclusion().is_some_and(|r| r.starts_with("unresolved")) {
            Some(-1.0 - f.central.chi2)
        } else {
            None
        }
    };
    let best = |min_states: usize| {
        fits.iter()
            .zip(&weights)
            .filter(|(f, _)| f.n_states >= min_states)
            .filter_map(|(f, &w)| Some((f, w, rank(f, w)?)))
            .filter(|(_, w, _)| min_states > 1 || *w > 0.0)
            .max_by(|a, b| a.2.total_cmp(&b.2))
            .map(|(f, weight, _)| ChosenFit {
                t_min: f.t_min,
                t_max: f.t_max,
                n_states: f.n_states,
                chi2_per_dof: f.central.chi2_per_dof(),
                p_value: f.central.p_value,
                weight,
                energies: f.energies.clone(),
                amplitudes: f.amplitudes.clone(),
            })
    };
    let chosen = best(1).ok_or_else(|| Error::analysis("spectrum", format!("{name}: no fit")))?;
    Ok((chosen, best(2)))
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
    for (i, (&p, series)) in channels.iter().enumerate() {
        progress(i, channels.len());
        let corr = resample_series(series, plan)?;
        let local = frames::momentum_settings(p, settings);
        match fit_correlator(p, &corr, &local, &mut warnings) {
            Ok(s) => {
                per_momentum.insert(p, s);
            }
            Err(e) if p != [0, 0, 0] => dropped.push((p, e.to_string())),
            Err(e) => return Err(e),
        }
    }
    progress(channels.len(), channels.len());
    let prior_note = frames::prior_frames_note(settings);
    gates::check(&mut per_momentum, &mut dropped)?;
    gates::summarise(&per_momentum, &dropped, &mut warnings);
    let mass = per_momentum
        .get(&[0, 0, 0])
        .map(|s: &MomentumSpectrum| s.energies[0].clone());
    let mut dispersion = Vec::new();
    match (settings.l_extent, &mass) {
        (Some(l), Some(m)) => {
            for (p, s) in per_momentum.iter().filter(|(p, _)| **p != [0, 0, 0]) {
                let pl =
                    crate::kinematics::lattice_momentum(*p, l, settings.twist.unwrap_or_default());
                dispersion.push(dispersion::check(*p, pl, &s.energies[0], m));
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

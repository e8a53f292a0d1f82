//! The fits of one momentum's correlator: the end of the fit range, every window with every
//! number of states (each window's covariance estimated once), the model average, and the
//! fits the later stages take their excited states from.

use super::effective::{effective_mass, EffectiveMassKind};
use super::model::Form;
use super::window::{fit_window, WindowFit, WindowSpec};
use super::{
    average, check_settings, frames, label, settings, ChosenFit, ModelAverage, MomentumSpectrum,
    SpectrumSettings,
};
use crate::data::Momentum;
use crate::error::{Error, Result};
use crate::fit::Weights;
use crate::resample::{covariance, Resampled};

/// Fit one resampled correlator: every `t_min` in range times every number of states, the
/// model average, the chosen fits and the effective mass.
///
/// `weighting` is the same correlator resampled by a delete-one jackknife over the bins (or
/// `corr` itself where the bins are not at hand): the fits' frozen covariance, the signal-based
/// `t_max` and the small-sample rule come from it, so that jackknife and bootstrap runs fit the
/// same windows with the same weights and differ only in the spread of their resamples.
/// (A bootstrap estimate of the covariance carries noise of order `1/sqrt(samples)`, and the
/// number of bootstrap samples says nothing about the number of independent measurements.)
///
/// `sample_scales`, when given, holds per time slice and per resample the standard deviation
/// of the bins that resample contains relative to that of all bins
/// ([`crate::resample::ResamplePlan::sample_error_scales`]); each resample's fit then weights
/// its points by its own errors (the frozen weights rescaled, correlations kept) rather than by
/// the central data's. Weights estimated from the data vary with the data, and a resampled
/// error only includes that part of the estimator's spread when every resample re-estimates
/// them as the central fit did; with frozen weights the errors of small ensembles come out
/// short (measured in `tests/spectrum_closure.rs`). `None` keeps the frozen weights (the
/// variational method's principal correlators, which have no bins of their own).
pub fn fit_correlator(
    momentum: Momentum,
    corr: &[Resampled],
    weighting: &[Resampled],
    sample_scales: Option<&[Vec<f64>]>,
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
    let (t_max, t_max_note) = fit_t_max(&name, momentum, corr, weighting, settings)?;
    let spec = WindowSpec {
        corr,
        form,
        priors: &settings.priors,
        fit: &settings.fit,
        label: &name,
        sample_scales,
    };
    let n_measurements = weighting.first().map_or(0, Resampled::len);
    let widest = (t_max + 1).saturating_sub(settings.t_min.from);
    // Said once for all momenta by the caller (see `run`).
    let small_sample = n_measurements < 5 * widest;
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
    let weights = Weighting {
        values: weighting,
        options: &cov_options,
        small_sample,
    };
    let fits = window_fits(&spec, settings, t_max, &weights, warnings)?;
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

/// The end of every fit window: set per momentum, or where the signal of `weighting` is lost
/// (with a note saying why), capped by `t_max`; refused when no window is left or the
/// correlator is not positive inside it.
fn fit_t_max(
    name: &str,
    momentum: Momentum,
    corr: &[Resampled],
    weighting: &[Resampled],
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
        None => frames::signal_t_max(
            weighting,
            settings.t_min.from,
            cap,
            settings.max_relative_error,
        ),
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

/// Where the fits' frozen covariance comes from (see [`fit_correlator`]).
struct Weighting<'a> {
    /// The correlator whose resampled covariance weights the fits.
    values: &'a [Resampled],
    /// Full, diagonal or shrunk.
    options: &'a covariance::CovarianceOptions,
    /// Fewer than five measurements per point (the Hartlap warning is said once, by the caller).
    small_sample: bool,
}

/// Every window `[t_min, t_max]` with every number of states, each window's covariance
/// estimated once; a fit that fails is dropped with a warning. Refused when none succeeds.
fn window_fits(
    spec: &WindowSpec,
    settings: &SpectrumSettings,
    t_max: usize,
    weighting: &Weighting,
    warnings: &mut Vec<String>,
) -> Result<Vec<WindowFit>> {
    let (cov_options, small_sample) = (weighting.options, weighting.small_sample);
    let (name, corr) = (spec.label, spec.corr);
    let n_samples = corr.first().map_or(0, Resampled::len);
    let mut fits = Vec::new();
    for t_min in settings.t_min.values().filter(|&t| t < t_max) {
        let window = &weighting.values[t_min..=t_max];
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

/// The highest-weight fit, and the highest-weight fit with at least two states (the excited
/// state the later stages take is the average over the multi-state fits, `average.excited`).
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

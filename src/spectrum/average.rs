//! Model averaging over fit windows and numbers of states (Jay & Neil, Phys. Rev. D 103
//! (2021) 114502; docs/methods.md §2). Fit `i` (k_i parameters, N_cut,i points dropped from the
//! widest window) gets the weight `w_i ∝ exp(-(chi2_i + 2 k_i + 2 N_cut,i) / 2)`, computed from
//! the central fits and normalised to one over the fits that are physical and resolved (see
//! `WindowFit::exclusion`; the others are listed with their reason and weight zero). The averaged value is `sum w_i mu_i` and its
//! variance `sum w_i sigma_i^2 + sum w_i mu_i^2 - (sum w_i mu_i)^2`, each `sigma_i` from the
//! median absolute deviation of fit `i`'s samples ([`Resampled::robust_variance`]).
//!
//! As a [`Resampled`]: the weights are fixed from the central fits; sample `s` is first
//! `sum w_i mu_i,s`, where a fit that jumped to another solution on that sample enters with
//! its central value moved like the others (`impute_jumped_samples`); then its deviations from the sample mean are scaled by one common factor
//! so that the resampled variance equals the Jay–Neil variance above (statistical part plus
//! the model spread). The central value is `sum w_i mu_i` on the central fits. Correlations
//! with other resampled quantities keep their sign and shape.

use super::window::WindowFit;
use crate::resample::Resampled;
use serde::Serialize;
use std::borrow::Cow;

/// One row of the model-average table.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AverageRow {
    /// First time slice.
    pub t_min: usize,
    /// Last time slice.
    pub t_max: usize,
    /// Number of states.
    pub n_states: usize,
    /// Fit parameters `k`.
    pub n_params: usize,
    /// Points dropped relative to the widest window, `N_cut`.
    pub n_cut: usize,
    /// Central chi-square (priors included).
    pub chi2: f64,
    /// Degrees of freedom.
    pub dof: i64,
    /// p-value.
    pub p_value: f64,
    /// Normalised model weight.
    pub weight: f64,
    /// Ground-state energy of this fit.
    pub energy: f64,
    /// Its resampled error.
    pub energy_error: f64,
    /// First excited energy of this fit (with at least two states).
    pub excited_energy: Option<f64>,
    /// Its resampled error.
    pub excited_energy_error: Option<f64>,
    /// Resamples whose fit did not converge.
    pub failed_samples: usize,
    /// Why the fit was left out of the average (weight zero), `None` when it is included.
    pub excluded: Option<String>,
}

/// The model average of the ground-state energy and amplitude.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ModelAverage {
    /// Averaged ground-state energy (error = statistical and model spread).
    pub energy: Resampled,
    /// Averaged ground-state amplitude (same construction).
    pub amplitude: Resampled,
    /// `sum w_i sigma_i^2` for the energy.
    pub statistical_variance: f64,
    /// `sum w_i mu_i^2 - (sum w_i mu_i)^2` for the energy.
    pub model_variance: f64,
    /// Every fit with its weight, in the order fitted.
    pub table: Vec<AverageRow>,
    /// The first excited state averaged over the included multi-state fits, `None` when no
    /// multi-state fit is included.
    pub excited: Option<ExcitedAverage>,
}

/// The first excited state as the model average over the included fits with at least two
/// states (their Jay–Neil weights normalised to one among them), each quantity averaged like
/// the ground energy ([`average`]: statistical and model variance, jumped samples imputed).
///
/// Why not the single highest-weight multi-state fit: which window wins is decided by the
/// same noisy data, and on the seeds where a later `t_min` wins, that fit's excited energy lay
/// far from the truth with a small error (heavy-pion mock, 400 seeds, rest frame: pull rms 1.08
/// where `t_min` = 2 won, 2.3–2.8 where a later one did, 1.37 overall; the average over the
/// multi-state fits 0.74; DEVELOPERS.md, closure tests). The selection is the step that made
/// the gap the two-state ratio fit takes too precise; averaging is the published remedy.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ExcitedAverage {
    /// The ground energy `E_0` averaged over the same fits (for the gap carried to moving
    /// frames, which needs both energies of the same fits).
    pub ground_energy: Resampled,
    /// The first excited energy `E_1`.
    pub energy: Resampled,
    /// The first gap `E_1 - E_0`, averaged fit by fit (each fit's own difference).
    pub gap: Resampled,
    /// The amplitude ratio `A_1 / A_0`, averaged fit by fit.
    pub amplitude_ratio: Resampled,
    /// Number of multi-state fits in the average.
    pub n_fits: usize,
}

/// Normalised Jay–Neil weights of `fits`, `n_cut` relative to `t_min_first`.
pub fn weights(fits: &[WindowFit], t_min_first: usize) -> Vec<f64> {
    weights_of_included(fits, t_min_first, &vec![true; fits.len()])
}

/// Jay–Neil weights over the fits marked `included` (the others get weight zero).
fn weights_of_included(fits: &[WindowFit], t_min_first: usize, included: &[bool]) -> Vec<f64> {
    let score: Vec<f64> = fits
        .iter()
        .zip(included)
        .map(|(f, &inc)| {
            let n_cut = f.t_min.saturating_sub(t_min_first) as f64;
            if inc {
                f.central.chi2 + 2.0 * f.n_params() as f64 + 2.0 * n_cut
            } else {
                f64::INFINITY
            }
        })
        .collect();
    let best = score.iter().copied().fold(f64::INFINITY, f64::min);
    let raw: Vec<f64> = score.iter().map(|s| (-(s - best) / 2.0).exp()).collect();
    let total: f64 = raw.iter().sum();
    raw.iter().map(|r| r / total).collect()
}

/// How far (in the fit's own ground-energy error) the effective mass at a fit's `t_min` may be
/// shifted by states the fit leaves out before the fit counts as contaminated.
pub const MAX_CONTAMINATION_SIGMA: f64 = 1.0;

/// Mark fits with fewer states than the best physical, resolved multi-state fit (lowest
/// Jay–Neil score) as contaminated when that fit's extra states shift the effective mass at
/// their `t_min` by more than [`MAX_CONTAMINATION_SIGMA`] times their ground-energy error
/// (from the central fit's parameter covariance, so the verdict is the same for jackknife and
/// bootstrap). Such a fit's energy is biased upward by at least about its own error; without
/// this rule the noisy chi-square of a small ensemble cannot tell it from a clean one, and
/// one-state fits at moderate `t_min` won the average several sigma above the truth.
fn exclude_contaminated(fits: &[WindowFit], t_min_first: usize, reasons: &mut [Option<String>]) {
    let score = |f: &WindowFit| {
        f.central.chi2
            + 2.0 * f.n_params() as f64
            + 2.0 * f.t_min.saturating_sub(t_min_first) as f64
    };
    let Some(reference) = fits
        .iter()
        .zip(reasons.iter())
        .filter(|(f, r)| r.is_none() && f.n_states > 1)
        .map(|(f, _)| f)
        .min_by(|a, b| score(a).total_cmp(&score(b)))
    else {
        return;
    };
    for (f, reason) in fits.iter().zip(reasons.iter_mut()) {
        if reason.is_some() || f.n_states >= reference.n_states {
            continue;
        }
        let shift = reference.contamination_shift(f.t_min as f64, f.n_states);
        let sigma = f.central.error(0).unwrap_or(f64::INFINITY);
        if shift > MAX_CONTAMINATION_SIGMA * sigma {
            *reason = Some(format!(
                "contaminated: the {}-state fit at t_min = {} shifts the effective mass at t = {} \
                 by {shift:.2e}, more than this fit's error {sigma:.1e}",
                reference.n_states, reference.t_min, f.t_min
            ));
        }
    }
}

/// Weighted average of per-fit values with the Jay–Neil variance, as a resampled value;
/// returns it with the statistical and model parts of the variance.
pub fn average(values: &[&Resampled], w: &[f64]) -> (Resampled, f64, f64) {
    // Fits of weight zero take no part (their samples may be anything).
    let (values, w): (Vec<&Resampled>, Vec<f64>) = values
        .iter()
        .zip(w)
        .filter(|(_, &w)| w > 0.0)
        .map(|(v, &w)| (*v, w))
        .unzip();
    let (values, w) = (values.as_slice(), w.as_slice());
    let mean_c: f64 = values.iter().zip(w).map(|(v, w)| w * v.central).sum();
    let stat: f64 = values
        .iter()
        .zip(w)
        .map(|(v, w)| w * v.robust_variance().0)
        .sum();
    let second: f64 = values
        .iter()
        .zip(w)
        .map(|(v, w)| w * v.central * v.central)
        .sum();
    let model = (second - mean_c * mean_c).max(0.0);
    let mut avg = Resampled::combine(values, |x| x.iter().zip(w).map(|(x, w)| w * x).sum());
    avg.central = mean_c;
    impute_jumped_samples(&mut avg, values, w);
    let var_avg = avg.variance();
    let target = stat + model;
    if var_avg > 0.0 && target.is_finite() {
        let f = (target / var_avg).sqrt();
        let m = avg.sample_mean();
        for x in &mut avg.samples {
            *x = m + f * (*x - m);
        }
    }
    (avg, stat, model)
}

/// Where fit `i` jumped to another solution on sample `s` (its value outside the fit's
/// [`Resampled::inlier_band`]), the averaged sample takes `c_i + d_s` in its place: the fit's
/// central value moved by the weighted mean deviation `d_s` of the fits that did not jump on
/// that sample (zero when all did). Without this, a jump in one window of small weight passed
/// its whole size into the averaged energy's samples and from there into every kinematic
/// factor and form factor downstream.
fn impute_jumped_samples(avg: &mut Resampled, values: &[&Resampled], w: &[f64]) {
    let bands: Vec<_> = values.iter().map(|v| v.inlier_band()).collect();
    if avg.samples.len() != values.first().map_or(0, |v| v.samples.len()) {
        return;
    }
    for (s, out) in avg.samples.iter_mut().enumerate() {
        let inlier = |i: usize| bands[i].as_ref().is_none_or(|b| b(values[i].samples[s]));
        if (0..values.len()).all(inlier) {
            continue;
        }
        let (mut dev, mut w_in) = (0.0, 0.0);
        for i in (0..values.len()).filter(|&i| inlier(i)) {
            dev += w[i] * (values[i].samples[s] - values[i].central);
            w_in += w[i];
        }
        let d = if w_in > 0.0 { dev / w_in } else { 0.0 };
        *out = (0..values.len())
            .map(|i| {
                let x = if inlier(i) {
                    values[i].samples[s]
                } else {
                    values[i].central + d
                };
                w[i] * x
            })
            .sum();
    }
}

/// The model average of `fits` (non-empty; all on the same correlator). Fits with a
/// [`WindowFit::exclusion`] get weight zero and keep their reason in the table; when every fit
/// is excluded, all of them are averaged (the caller warns).
pub fn model_average(fits: &[WindowFit], t_min_first: usize) -> ModelAverage {
    let mut reasons: Vec<Option<String>> = fits.iter().map(WindowFit::exclusion).collect();
    exclude_contaminated(fits, t_min_first, &mut reasons);
    let mut included: Vec<bool> = reasons.iter().map(Option::is_none).collect();
    if !included.contains(&true) {
        included.fill(true);
    }
    let w = weights_of_included(fits, t_min_first, &included);
    let e: Vec<&Resampled> = fits.iter().map(|f| &f.energies[0]).collect();
    let a: Vec<&Resampled> = fits.iter().map(|f| &f.amplitudes[0]).collect();
    let (energy, statistical_variance, model_variance) = average(&e, &w);
    let (amplitude, _, _) = average(&a, &w);
    let excited = excited_average(fits, t_min_first, &reasons);
    let table = fits
        .iter()
        .zip(&w)
        .zip(reasons)
        .map(|((f, &weight), excluded)| AverageRow {
            t_min: f.t_min,
            t_max: f.t_max,
            n_states: f.n_states,
            n_params: f.n_params(),
            n_cut: f.t_min - t_min_first,
            chi2: f.central.chi2,
            dof: f.central.dof,
            p_value: f.central.p_value,
            weight,
            energy: f.energies[0].central,
            energy_error: f.energies[0].robust_error(),
            excited_energy: f.energies.get(1).map(|e| e.central),
            excited_energy_error: f.energies.get(1).map(Resampled::robust_error),
            failed_samples: f.failed_samples,
            excluded,
        })
        .collect();
    ModelAverage {
        energy,
        amplitude,
        statistical_variance,
        model_variance,
        table,
        excited,
    }
}

/// The average of the first excited state over the fits with at least two states that are
/// physical, resolved and not contaminated (`reasons` all `None`), with their Jay–Neil
/// weights normalised among them; `None` when there is no such fit.
fn excited_average(
    fits: &[WindowFit],
    t_min_first: usize,
    reasons: &[Option<String>],
) -> Option<ExcitedAverage> {
    let multi: Vec<bool> = fits
        .iter()
        .zip(reasons)
        .map(|(f, r)| r.is_none() && f.n_states > 1)
        .collect();
    let n_fits = multi.iter().filter(|&&m| m).count();
    if n_fits == 0 {
        return None;
    }
    let w = weights_of_included(fits, t_min_first, &multi);
    // Fits of weight zero take no part in `average`; their entries are only placeholders
    // (borrowed: the ground energy every fit has).
    let per_fit = |g: fn(&WindowFit) -> Cow<'_, Resampled>| -> Resampled {
        let values: Vec<Cow<'_, Resampled>> = fits
            .iter()
            .zip(&multi)
            .map(|(f, &m)| {
                if m {
                    g(f)
                } else {
                    Cow::Borrowed(&f.energies[0])
                }
            })
            .collect();
        average(&values.iter().map(AsRef::as_ref).collect::<Vec<_>>(), &w).0
    };
    Some(ExcitedAverage {
        ground_energy: per_fit(|f| Cow::Borrowed(&f.energies[0])),
        energy: per_fit(|f| Cow::Borrowed(&f.energies[1])),
        gap: per_fit(|f| Cow::Owned(&f.energies[1] - &f.energies[0])),
        amplitude_ratio: per_fit(|f| Cow::Owned(&f.amplitudes[1] / &f.amplitudes[0])),
        n_fits,
    })
}

//! One fit window `[t_min, t_max]` with a given number of states, fitted on the central value
//! and on every resample with one frozen covariance (docs/methods.md §2: the covariance is
//! estimated once from the resamples and held fixed for every resample's fit; common
//! practice). Starting values come from the effective mass at `t_min`; every resample starts
//! from the central fit. Resamples are fitted in parallel and collected in order, so the
//! result does not depend on the number of threads.

use super::effective::{effective_mass_value, EffectiveMassKind};
use super::model::{Form, TwoPointModel};
use super::settings::PriorSettings;
use crate::error::{Error, Result};
use crate::fit::{nonlinear, FitReport, FitSettings, Prior, Response, Weights};
use crate::resample::Resampled;
use rayon::prelude::*;

/// The fit of one window on the central value and on every resample.
#[derive(Clone, Debug, PartialEq)]
pub struct WindowFit {
    /// First time slice fitted.
    pub t_min: usize,
    /// Last time slice fitted (inclusive).
    pub t_max: usize,
    /// Number of states.
    pub n_states: usize,
    /// The fit of the central value.
    pub central: FitReport,
    /// Energies `E_0..E_{N-1}` per resample.
    pub energies: Vec<Resampled>,
    /// Amplitudes `A_0..A_{N-1}` per resample.
    pub amplitudes: Vec<Resampled>,
    /// Resamples whose fit did not converge (their parameters are kept but suspect).
    pub failed_samples: usize,
    /// Whether the first gap had a prior carried from the rest frame; the amplitudes then only
    /// need to differ from zero by one error to count as resolved (see [`Self::exclusion`]).
    pub gap_from_rest: bool,
}

/// Significance (value over its error) below which an excited state counts as unresolved.
const MIN_SIGNIFICANCE: f64 = 2.0;
/// [`MIN_SIGNIFICANCE`] for fits whose first gap has a prior carried from the rest frame.
const MIN_SIGNIFICANCE_WITH_GAP_PRIOR: f64 = 1.0;
/// Error of a log-gap above which the gap counts as undetermined (a factor of about 2).
const MAX_LOG_GAP_ERROR: f64 = 0.7;

impl WindowFit {
    /// Number of fit parameters.
    pub fn n_params(&self) -> usize {
        2 * self.n_states
    }

    /// Shift of the effective mass at time `t` caused by this fit's states `k..` (central
    /// parameters): `ln((1 + c(t)) / (1 + c(t + 1)))` with `c(t) = sum_{n >= k} (A_n / A_0)
    /// e^{-(E_n - E_0) t}`. It is the excited-state contamination that a fit with only `k`
    /// states would absorb into its ground energy near `t` (zero for `k >= n_states`).
    pub fn contamination_shift(&self, t: f64, k: usize) -> f64 {
        let e = self.energies.iter().map(|e| e.central).collect::<Vec<_>>();
        let a = self
            .amplitudes
            .iter()
            .map(|a| a.central)
            .collect::<Vec<_>>();
        let c = |t: f64| -> f64 {
            (k.max(1)..self.n_states)
                .map(|n| a[n] / a[0] * (-(e[n] - e[0]) * t).exp())
                .sum()
        };
        let shift = ((1.0 + c(t)) / (1.0 + c(t + 1.0))).ln();
        if shift.is_finite() {
            shift
        } else {
            0.0
        }
    }

    /// Why this fit must not enter the model average, judged on the central fit alone (its
    /// parameter covariance), so the verdict is the same for jackknife and bootstrap: a
    /// non-positive ground energy, an amplitude of the wrong sign for a diagonal correlator
    /// (`A_n = |Z_n|^2 / 2E_n > 0`), or an extra state the data do not resolve (amplitude
    /// consistent with zero, or a log-gap whose error exceeds `MAX_LOG_GAP_ERROR`). Such a
    /// fit's resamples jump between solutions; the bootstrap, whose samples lie farther from
    /// the central value than the jackknife's, then sees a much wider spread than the
    /// jackknife, which is what made the two schemes disagree.
    pub fn exclusion(&self) -> Option<String> {
        let p = &self.central.params;
        let ns = self.n_states;
        if p[0] <= 0.0 {
            return Some(format!("ground energy {:.4} is not positive", p[0]));
        }
        if let Some(n) = (0..ns).find(|&n| p[ns + n] <= 0.0) {
            return Some(format!(
                "amplitude A{n} = {:.3e} is not positive (diagonal correlator)",
                p[ns + n]
            ));
        }
        let err = |k: usize| self.central.error(k).unwrap_or(f64::INFINITY);
        if ns == 1 {
            return None;
        }
        // With the first gap pinned by the rest frame, the ground and excited amplitudes of a
        // near-degenerate pair are strongly anti-correlated (their sum is well determined, the
        // split is not), and a spurious state far from the data's cannot appear; one error then
        // suffices. Without it, two are required (issue-10 case 1: a free "ground state" far
        // below the true one with a huge error).
        let min_significance = if self.gap_from_rest {
            MIN_SIGNIFICANCE_WITH_GAP_PRIOR
        } else {
            MIN_SIGNIFICANCE
        };
        for n in 0..ns {
            let k = ns + n;
            if p[k] < min_significance * err(k) {
                let what = if n == 0 { "ground" } else { "excited" };
                return Some(format!(
                    "unresolved: {what} amplitude A{n} = {:.3e} +- {:.1e} is consistent with zero",
                    p[k],
                    err(k)
                ));
            }
        }
        for (n, log_gap) in p.iter().enumerate().take(ns).skip(1) {
            if err(n) > MAX_LOG_GAP_ERROR {
                return Some(format!(
                    "unresolved: gap E{n} - E{} = {:.3} known only to a factor e^{:.2}",
                    n - 1,
                    log_gap.exp(),
                    err(n)
                ));
            }
        }
        None
    }
}

/// Problem description shared by the windows of one correlator.
pub(crate) struct WindowSpec<'a> {
    /// The resampled correlator at every time slice.
    pub corr: &'a [Resampled],
    /// Periodic or plain exponential.
    pub form: Form,
    /// Priors from the settings.
    pub priors: &'a PriorSettings,
    /// Solver settings.
    pub fit: &'a FitSettings,
    /// What to call the correlator in messages.
    pub label: &'a str,
    /// Per time slice and resample, the factor by which that resample's errors differ from
    /// the central data's (see [`super::fit_correlator`]); `None`: frozen weights.
    pub sample_scales: Option<&'a [Vec<f64>]>,
}

fn effective_kind(form: Form) -> EffectiveMassKind {
    match form {
        Form::Exponential => EffectiveMassKind::Log,
        Form::Periodic { t_extent } => EffectiveMassKind::Cosh { t_extent },
    }
}

/// Fit `[t_min, t_max]` with `n_states` states using weights `w` (from the covariance of the
/// window's resamples, estimated once by the caller).
pub(crate) fn fit_window(
    spec: &WindowSpec,
    t_min: usize,
    t_max: usize,
    n_states: usize,
    w: &Weights,
) -> Result<WindowFit> {
    let n_pts = (t_max + 1).saturating_sub(t_min);
    let np = 2 * n_states;
    if t_max >= spec.corr.len() || n_pts < np {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "{}: window [{t_min}, {t_max}] has {n_pts} points for {np} parameters \
                 ({n_states} states) within {} time slices; widen the window or fit fewer states",
                spec.label,
                spec.corr.len()
            ),
        ));
    }
    let window = &spec.corr[t_min..=t_max];
    let times: Vec<f64> = (t_min..=t_max).map(|t| t as f64).collect();
    let model = TwoPointModel::new(times, n_states, spec.form);
    let kind = effective_kind(spec.form);
    // Starting values: the first defined effective mass in the window.
    let e0 = (t_min..t_max)
        .find_map(|t| {
            effective_mass_value(
                kind,
                spec.corr[t].central,
                spec.corr[t + 1].central,
                t as f64,
            )
        })
        .filter(|e| *e > 0.0)
        .unwrap_or(0.5);
    let a0 = spec.corr[t_min].central / spec.form.term(e0, t_min as f64).0;
    let gap_prior = |n: usize| match (n, spec.priors.first_log_gap) {
        (1, Some(first)) => Some(first),
        _ => spec.priors.log_gap,
    };
    let gap0 = |n: usize| gap_prior(n).map_or(0.5f64.ln(), |p| p.mean);
    let ratio0 = spec.priors.excited_amplitude_ratio.map_or(0.5, |p| p.mean);
    let mut start = vec![e0];
    start.extend((1..n_states).map(gap0));
    start.push(a0);
    start.extend(std::iter::repeat_n(ratio0 * a0, n_states - 1));
    let scale = a0.abs().max(f64::MIN_POSITIVE);
    let mut priors: Vec<Option<Prior>> = vec![None; np];
    priors[0] = spec.priors.ground_energy;
    for n in 1..n_states {
        priors[TwoPointModel::log_gap_index(n)] = gap_prior(n);
        priors[model.amplitude_index(n)] = spec
            .priors
            .excited_amplitude_ratio
            .map(|p| Prior::new(p.mean * scale, p.width * scale));
    }
    let y: Vec<f64> = window.iter().map(|c| c.central).collect();
    let central = nonlinear::fit(&model, &y, w, &priors, &start, spec.fit);
    if !central.converged {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "{}: fit of [{t_min}, {t_max}] with {n_states} states did not converge: {}",
                spec.label, central.message
            ),
        ));
    }
    let response = Response::at_minimum(&model, &y, w, &central);
    let n_s = window[0].len();
    let window_scales = spec.sample_scales.and_then(|s| s.get(t_min..=t_max));
    let samples: Vec<FitReport> = (0..n_s)
        .into_par_iter()
        .map(|s| {
            let y: Vec<f64> = window.iter().map(|c| c.samples[s]).collect();
            let own = window_scales.map(|scales| {
                let f: Vec<f64> = scales
                    .iter()
                    .map(|t| t.get(s).copied().unwrap_or(1.0))
                    .collect();
                w.rescaled(&f)
            });
            let w = own.as_ref().unwrap_or(w);
            let start = response.as_ref().map(|r| r.start(&y, w));
            let start = start.as_deref().unwrap_or(&central.params);
            nonlinear::fit_without_covariance(&model, &y, w, &priors, start, spec.fit)
        })
        .collect();
    let failed_samples = samples.iter().filter(|r| !r.converged).count();
    let scheme = window[0].scheme;
    let e_c = model.energies(&central.params);
    let e_s: Vec<Vec<f64>> = samples.iter().map(|r| model.energies(&r.params)).collect();
    let energies = (0..n_states)
        .map(|n| Resampled::new(e_c[n], e_s.iter().map(|e| e[n]).collect(), scheme))
        .collect();
    let amplitudes = (0..n_states)
        .map(|n| {
            let k = model.amplitude_index(n);
            Resampled::new(
                central.params[k],
                samples.iter().map(|r| r.params[k]).collect(),
                scheme,
            )
        })
        .collect();
    Ok(WindowFit {
        t_min,
        t_max,
        n_states,
        central,
        energies,
        amplitudes,
        failed_samples,
        gap_from_rest: n_states > 1 && spec.priors.first_log_gap.is_some(),
    })
}

//! The per-configuration series of one mock channel: its seeded unit noise, the noise growth,
//! the rounding of written values, and the single-operator two- and three-point series. The
//! operator-basis series (`matrix.rs`) share the three-point set-up ([`ThreePointSetup`]).

use super::model::{envelope, threept_mean, twopt_mean, MomentumLevels};
use super::noise::{channel_rng, time_correlation_factor, unit_noise};
use super::spec::{MockSpec, Transitions};
use crate::data::{sub, Current, Momentum, Projector, Series};
use crate::kinematics::Hadron;
use nalgebra::Complex;
use std::collections::BTreeMap;

/// One three-point channel (all `tsep`) to generate.
pub(super) struct Planned {
    pub(super) pf: Momentum,
    pub(super) q: Momentum,
    pub(super) current: Current,
    pub(super) projector: Projector,
    pub(super) pi: Complex<f64>,
}

/// Unit noise of `n_t` time slices for the channel named `label`.
pub(super) fn unit_noise_for(spec: &MockSpec, label: &str, n_t: usize) -> Vec<f64> {
    let noise = &spec.noise;
    let mut rng = channel_rng(spec.seed, label);
    let factor = time_correlation_factor(n_t, noise.time_correlation.0);
    unit_noise(
        &mut rng,
        &factor,
        spec.ensemble.configs,
        noise.autocorrelation.0,
    )
}

/// Growth rate `g(p)` of the noise-to-signal ratio at one momentum.
pub(super) fn growth(spec: &MockSpec, levels: &MomentumLevels) -> f64 {
    match (spec.noise.growth_rate, spec.hadron.kind, spec.hadron.m_pi) {
        (Some(g), _, _) => g,
        (None, Hadron::Spin1Half, Some(m_pi)) => levels.levels[0].energy - 1.5 * m_pi.0,
        _ => 0.0,
    }
}

/// One two-point series: mean times `(1 + s e^{g t} eta)` in the real part, noise of the same
/// size in the imaginary part (whose mean is zero).
pub(super) fn twopt_series(spec: &MockSpec, levels: &MomentumLevels, eta_re: &[f64]) -> Series {
    let (n_t, n_cfg) = (spec.ensemble.t, spec.ensemble.configs);
    let mut s = Series::zeros(n_t, n_cfg);
    let size = spec.noise.twopt.0;
    let g = growth(spec, levels);
    let eta_im = if size > 0.0 {
        unit_noise_for(spec, &format!("twopt im {:?}", levels.n), n_t)
    } else {
        vec![0.0; n_t * n_cfg]
    };
    let digits = spec.output.significant_digits;
    for t in 0..n_t {
        let mean = twopt_mean(levels, t, n_t, spec.hadron.periodic);
        let sigma = size * (g * t as f64).exp() * mean.abs();
        for c in 0..n_cfg {
            let i = s.index(t, c);
            s.re[i] = round(mean + sigma * eta_re[i], digits);
            s.im[i] = round(sigma * eta_im[i], digits);
        }
    }
    s
}

/// What every three-point series of one planned channel at one `tsep` shares, with one
/// operator or between a basis of operators: the states at sink and source, the transition
/// strengths, the noise stream label and the noise sizes.
pub(super) struct ThreePointSetup<'a> {
    /// Energies and overlaps at the sink (`p_f`) and at the source (`p_f - q`).
    pub(super) sink: &'a MomentumLevels,
    pub(super) source: &'a MomentumLevels,
    /// Transition strengths `r[m][n]` of the channel's current kind.
    pub(super) r: Vec<Vec<f64>>,
    /// Name of the channel's noise streams.
    pub(super) label: String,
    /// Source–sink separation and the number of `tau` values (`tsep + 1`).
    pub(super) tsep: usize,
    pub(super) n_t: usize,
    /// Noise size at `tsep = 0` and its growth rates at the sink and the source.
    pub(super) size: f64,
    pub(super) g_f: f64,
    pub(super) g_i: f64,
    n_cfg: usize,
    /// Correlation with the dividing two-point function, and the weight of the own part.
    k: f64,
    own: f64,
    signal_in_re: bool,
    digits: Option<u32>,
}

impl<'a> ThreePointSetup<'a> {
    pub(super) fn new(
        spec: &MockSpec,
        spectrum: &'a BTreeMap<Momentum, MomentumLevels>,
        tsep: usize,
        p: &Planned,
    ) -> Self {
        let n_states = spec.hadron.states.len();
        let (sink, source) = (&spectrum[&p.pf], &spectrum[&sub(p.pf, p.q)]);
        let k = spec.noise.twopt_threept_correlation.0;
        ThreePointSetup {
            sink,
            source,
            r: conserve_charge(
                spec.transitions
                    .for_kind(p.current.kind())
                    .map(|t| t.matrix(n_states))
                    .unwrap_or_else(|| ground_only(n_states)),
                p,
            ),
            label: format!(
                "threept {tsep} {:?} {:?} {} {}",
                p.pf, p.q, p.current, p.projector
            ),
            tsep,
            n_t: tsep + 1,
            size: spec.noise.threept.0,
            g_f: growth(spec, sink),
            g_i: growth(spec, source),
            n_cfg: spec.ensemble.configs,
            k,
            own: (1.0 - k * k).sqrt(),
            signal_in_re: p.pi.re.abs() >= p.pi.im.abs(),
            digits: spec.output.significant_digits,
        }
    }

    /// `e^{g_f (tsep - tau) + g_i tau}`, the growth of the noise-to-signal ratio at `tau`.
    pub(super) fn noise_growth(&self, tau: usize) -> f64 {
        (self.g_f * (self.tsep - tau) as f64 + self.g_i * tau as f64).exp()
    }

    /// Write time slice `tau` of `s`: `mean` plus `sigma` times the noise, whose part that
    /// carries the signal shares the component `k eta_2(tsep)` with the two-point noise
    /// `eta_twopt_sink` of `C2(tsep; p_f)`.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn fill(
        &self,
        s: &mut Series,
        tau: usize,
        mean: Complex<f64>,
        sigma: f64,
        (eta_re, eta_im): (&[f64], &[f64]),
        eta_twopt_sink: &[f64],
    ) {
        for c in 0..self.n_cfg {
            let i = s.index(tau, c);
            let shared = self.k * eta_twopt_sink[self.tsep * self.n_cfg + c];
            let (nr, ni) = if self.signal_in_re {
                (shared + self.own * eta_re[i], eta_im[i])
            } else {
                (eta_re[i], shared + self.own * eta_im[i])
            };
            s.re[i] = round(mean.re + sigma * nr, self.digits);
            s.im[i] = round(mean.im + sigma * ni, self.digits);
        }
    }
}

/// One three-point series over `tau = 0..=tsep`. The noise is the ground-state envelope times
/// `s e^{g_f (tsep - tau) + g_i tau}`; in the part that carries the signal it shares the
/// component `k eta_2(tsep)` with the two-point function `C2(tsep; p_f)` that divides it.
pub(super) fn threept_series(
    spec: &MockSpec,
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
    eta_twopt_sink: &[f64],
    tsep: usize,
    p: &Planned,
) -> Series {
    let setup = ThreePointSetup::new(spec, spectrum, tsep, p);
    let (n_t, n_cfg) = (setup.n_t, spec.ensemble.configs);
    let (eta_re, eta_im) = if setup.size > 0.0 {
        (
            unit_noise_for(spec, &format!("{} re", setup.label), n_t),
            unit_noise_for(spec, &format!("{} im", setup.label), n_t),
        )
    } else {
        (vec![0.0; n_t * n_cfg], vec![0.0; n_t * n_cfg])
    };
    let (sink, source) = (setup.sink, setup.source);
    let mut s = Series::zeros(n_t, n_cfg);
    for tau in 0..n_t {
        let mean = threept_mean(sink, source, tsep, tau, p.pi, &setup.r);
        let sigma = setup.size * setup.noise_growth(tau) * envelope(sink, source, tsep, tau);
        setup.fill(&mut s, tau, mean, sigma, (&eta_re, &eta_im), eta_twopt_sink);
    }
    s
}

/// The transition strengths of one channel with current conservation imposed: at `q = 0`
/// (equal sink and source momenta, hence equal twists) the charge `V4` connects no two
/// different states, since `q_mu <m|V^mu|n> = (E_m - E_n) <m|V_4|n> = 0` there, and it counts
/// the same charge in every state, so `r[n][n] = r[0][0] = 1`: the ratio of the charge is then
/// exactly the ground state's matrix element at every `tau` and `tsep` (methods §8).
fn conserve_charge(mut r: Vec<Vec<f64>>, p: &Planned) -> Vec<Vec<f64>> {
    if p.current == Current::V4 && p.q == [0, 0, 0] {
        for (m, row) in r.iter_mut().enumerate() {
            for (n, strength) in row.iter_mut().enumerate() {
                *strength = if m == n { 1.0 } else { 0.0 };
            }
        }
    }
    r
}

/// Transition strengths when none are given: the ground state alone.
fn ground_only(n_states: usize) -> Vec<Vec<f64>> {
    Transitions {
        source_excited: vec![0.0; n_states - 1],
        sink_excited: None,
        both_excited: Vec::new(),
    }
    .matrix(n_states)
}

/// Round to `digits` significant digits (none: unchanged), through the decimal form so that
/// the written number is short.
pub(super) fn round(x: f64, digits: Option<u32>) -> f64 {
    match digits {
        Some(d) if x.is_finite() && x != 0.0 => {
            format!("{:.*e}", d as usize - 1, x).parse().unwrap_or(x)
        }
        _ => x,
    }
}

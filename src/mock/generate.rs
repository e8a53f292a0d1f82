//! Assemble a mock ensemble: plan the channels, compute the noise-free means from the truth,
//! add the noise, and collect everything in the [`crate::data`] model and a [`Truth`].

use super::channels::momentum_pairs;
use super::model::{
    envelope, form_factor, levels, threept_mean, twopt_mean, FormFactorContext, MomentumLevels,
};
use super::noise::{channel_rng, time_correlation_factor, unit_noise};
use super::spec::{MockSpec, Transitions};
use super::truth::{
    Truth, TruthConfigs, TruthHadron, TruthLattice, TruthLevels, TruthMatrixElement, TruthPoint,
};
use crate::data::{
    sub, Current, Momentum, Projector, Series, ThreePointData, ThreePointKey, TwoPointData,
    TwoPointKey,
};
use crate::kinematics::{self, Hadron, OnShell};
use crate::{Error, Result};
use nalgebra::Complex;
use rayon::prelude::*;
use std::collections::{BTreeMap, BTreeSet};

/// Kinematic factors smaller than this in magnitude count as vanishing.
const VANISHING: f64 = 1e-12;

/// A generated mock ensemble, in memory.
#[derive(Clone, Debug, PartialEq)]
pub struct MockEnsemble {
    /// Two-point functions.
    pub twopt: TwoPointData,
    /// Three-point functions.
    pub threept: ThreePointData,
    /// What they were generated from.
    pub truth: Truth,
}

/// One three-point channel (all `tsep`) to generate.
pub(super) struct Planned {
    pub(super) pf: Momentum,
    pub(super) q: Momentum,
    pub(super) current: Current,
    pub(super) projector: Projector,
    pub(super) pi: Complex<f64>,
}

/// Generate the ensemble described by `spec` (validated again here, so specs built in code
/// get the same checks as files).
pub fn generate(spec: &MockSpec) -> Result<MockEnsemble> {
    spec.validate()
        .map_err(|m| Error::config(format!("mock spec: {m}")))?;
    let l = spec.ensemble.l;
    let pairs = momentum_pairs(&spec.channels.momenta);
    let momenta: BTreeSet<Momentum> = pairs.iter().flat_map(|&(pf, q)| [pf, sub(pf, q)]).collect();
    let spectrum: BTreeMap<Momentum, MomentumLevels> = momenta
        .iter()
        .map(|&n| (n, levels(&spec.hadron, l, n)))
        .collect();
    let (points, planned, elements) = plan_channels(spec, &pairs, &spectrum)?;
    let n_ops = spec.operators.as_ref().map_or(1, |b| b.basis.len());
    check_memory(
        spec,
        momenta.len() * n_ops * n_ops,
        planned.len() * n_ops * n_ops,
    )?;

    let n_cfg = spec.ensemble.configs;
    let configs: Vec<i64> = (0..n_cfg as i64)
        .map(|c| spec.ensemble.first_config + c * spec.ensemble.config_step)
        .collect();
    if let Some(basis) = &spec.operators {
        let (twopt, threept) = matrix_data(spec, basis, &spectrum, &planned, configs);
        let truth = truth(spec, &spectrum, points, elements);
        return Ok(MockEnsemble {
            twopt,
            threept,
            truth,
        });
    }
    let twopt_noise: BTreeMap<Momentum, Vec<f64>> = momenta
        .iter()
        .map(|&n| {
            (
                n,
                unit_noise_for(spec, &format!("twopt re {n:?}"), spec.ensemble.t),
            )
        })
        .collect();
    let mut twopt = TwoPointData {
        configs: configs.clone(),
        channels: BTreeMap::new(),
    };
    for (n, levels) in &spectrum {
        let series = twopt_series(spec, levels, &twopt_noise[n]);
        twopt.channels.insert(
            TwoPointKey {
                momentum: *n,
                smear: None,
                ops: None,
            },
            series,
        );
    }

    let jobs: Vec<(u32, &Planned)> = spec
        .channels
        .tseps
        .iter()
        .flat_map(|&tsep| planned.iter().map(move |p| (tsep, p)))
        .collect();
    let series: Vec<(ThreePointKey, Series)> = jobs
        .par_iter()
        .map(|&(tsep, p)| {
            let key = ThreePointKey {
                tsep,
                pf: p.pf,
                q: p.q,
                current: p.current,
                projector: p.projector,
                flavor: None,
                diagram: None,
                ops: None,
            };
            let s = threept_series(spec, &spectrum, &twopt_noise[&p.pf], tsep as usize, p);
            (key, s)
        })
        .collect();
    let threept = ThreePointData {
        configs,
        channels: series.into_iter().collect(),
    };

    let truth = truth(spec, &spectrum, points, elements);
    Ok(MockEnsemble {
        twopt,
        threept,
        truth,
    })
}

/// The operator-basis data: the two-point matrix at every momentum and the three-point
/// functions between every sink and source operator.
fn matrix_data(
    spec: &MockSpec,
    basis: &super::spec::BasisSpec,
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
    planned: &[Planned],
    configs: Vec<i64>,
) -> (TwoPointData, ThreePointData) {
    use super::matrix::{threept_matrix, twopt_matrix, twopt_noise};
    let noise: BTreeMap<Momentum, Vec<Vec<f64>>> = spectrum
        .keys()
        .map(|&n| (n, twopt_noise(spec, basis, n)))
        .collect();
    let twopt = TwoPointData {
        configs: configs.clone(),
        channels: spectrum
            .iter()
            .flat_map(|(n, levels)| twopt_matrix(spec, basis, levels, &noise[n]))
            .collect(),
    };
    let jobs: Vec<(u32, &Planned)> = spec
        .channels
        .tseps
        .iter()
        .flat_map(|&tsep| planned.iter().map(move |p| (tsep, p)))
        .collect();
    let series: Vec<Vec<(ThreePointKey, Series)>> = jobs
        .par_iter()
        .map(|&(tsep, p)| threept_matrix(spec, basis, spectrum, &noise[&p.pf], tsep as usize, p))
        .collect();
    let threept = ThreePointData {
        configs,
        channels: series.into_iter().flatten().collect(),
    };
    (twopt, threept)
}

/// Refuse a spec whose series would not fit in memory: the two-point series and their unit
/// noise (`momenta x T x configs`), the time-correlation factor (`T x T`) and the three-point
/// series (`channels x (tsep + 1) x configs` per `tsep`), real and imaginary parts.
fn check_memory(spec: &MockSpec, n_momenta: usize, n_planned: usize) -> Result<()> {
    use crate::budget::product;
    let (t, n_cfg) = (spec.ensemble.t as u64, spec.ensemble.configs as u64);
    let mut values = product(&[n_momenta as u64, t, n_cfg, 3]).saturating_add(product(&[t, t]));
    for &tsep in &spec.channels.tseps {
        let n_tau = u64::from(tsep) + 1;
        values = values.saturating_add(product(&[n_planned as u64, n_tau, n_cfg, 2]));
        values = values.saturating_add(product(&[n_tau, n_tau]));
    }
    crate::budget::check(
        &format!(
            "mock spec: {n_cfg} configurations x T = {t} with {n_momenta} momenta and {n_planned} three-point channels per tsep"
        ),
        values.saturating_mul(8),
    )
    .map_err(Error::config)
}

type Plan = (Vec<TruthPoint>, Vec<Planned>, Vec<TruthMatrixElement>);

/// Form factors at every `(p_f, q)` and the matrix element of every channel to generate.
fn plan_channels(
    spec: &MockSpec,
    pairs: &[(Momentum, Momentum)],
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
) -> Result<Plan> {
    // safe: `generate` validated 1 to 3 states.
    let mass = spec.hadron.states[0].mass.0;
    let cx = FormFactorContext {
        mass,
        m_pi: spec.hadron.m_pi.map(|m| m.0),
        models: &spec.form_factors,
    };
    let hadron = spec.hadron.kind;
    let combinations = spec.channels.combinations();
    let (mut points, mut planned, mut elements) = (Vec::new(), Vec::new(), Vec::new());
    for &(pf, q) in pairs {
        let pi = sub(pf, q);
        let (sink, source) = (&spectrum[&pf], &spectrum[&pi]);
        let k = OnShell {
            mass,
            pf: sink.p,
            pi: source.p,
            ef: sink.levels[0].energy,
            ei: source.levels[0].energy,
        };
        let q2 = kinematics::q_squared(&k);
        let mut values = BTreeMap::new();
        for (name, model) in spec.form_factors.by_name() {
            let v = form_factor(model, q2, &cx).ok_or_else(|| {
                Error::config(format!(
                    "mock spec: form_factors.{name} cannot be evaluated (pion_pole needs GA and hadron.m_pi)"
                ))
            })?;
            values.insert(name.to_string(), v);
        }
        for &(current, projector) in &combinations {
            let coefficients = kinematics::coefficients(hadron, projector, current, &k);
            if spec.channels.skip_vanishing
                && coefficients.iter().all(|(_, c)| c.norm() <= VANISHING)
            {
                continue;
            }
            let mut pi_value = Complex::new(0.0, 0.0);
            let mut factors = BTreeMap::new();
            for (ff, c) in &coefficients {
                let name = ff.name();
                let g = values.get(name).ok_or_else(|| {
                    Error::config(format!(
                        "mock spec: form_factors.{name}: needed by current {current} with projector {projector}"
                    ))
                })?;
                pi_value += c * *g;
                factors.insert(name.to_string(), [c.re, c.im]);
            }
            elements.push(TruthMatrixElement {
                pf,
                q,
                current: current.name().to_string(),
                projector: projector.name().to_string(),
                re: pi_value.re,
                im: pi_value.im,
                kinematic_factors: factors,
            });
            planned.push(Planned {
                pf,
                q,
                current,
                projector,
                pi: pi_value,
            });
        }
        points.push(TruthPoint {
            pf,
            q,
            pi,
            q2,
            q2_gev2: kinematics::q2_to_gev2(q2, spec.ensemble.a_fm.0),
            form_factors: values,
        });
    }
    Ok((points, planned, elements))
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
fn twopt_series(spec: &MockSpec, levels: &MomentumLevels, eta_re: &[f64]) -> Series {
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

/// One three-point series over `tau = 0..=tsep`. The noise is the ground-state envelope times
/// `s e^{g_f (tsep - tau) + g_i tau}`; in the part that carries the signal it shares the
/// component `k eta_2(tsep)` with the two-point function `C2(tsep; p_f)` that divides it.
fn threept_series(
    spec: &MockSpec,
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
    eta_twopt_sink: &[f64],
    tsep: usize,
    p: &Planned,
) -> Series {
    let n_cfg = spec.ensemble.configs;
    let n_t = tsep + 1;
    let (sink, source) = (&spectrum[&p.pf], &spectrum[&sub(p.pf, p.q)]);
    let n_states = spec.hadron.states.len();
    let r = spec
        .transitions
        .for_kind(p.current.kind())
        .map(|t| t.matrix(n_states))
        .unwrap_or_else(|| ground_only(n_states));
    let size = spec.noise.threept.0;
    let label = format!(
        "threept {tsep} {:?} {:?} {} {}",
        p.pf, p.q, p.current, p.projector
    );
    let (eta_re, eta_im) = if size > 0.0 {
        (
            unit_noise_for(spec, &format!("{label} re"), n_t),
            unit_noise_for(spec, &format!("{label} im"), n_t),
        )
    } else {
        (vec![0.0; n_t * n_cfg], vec![0.0; n_t * n_cfg])
    };
    let k = spec.noise.twopt_threept_correlation.0;
    let own = (1.0 - k * k).sqrt();
    let signal_in_re = p.pi.re.abs() >= p.pi.im.abs();
    let (g_f, g_i) = (growth(spec, sink), growth(spec, source));
    let digits = spec.output.significant_digits;
    let mut s = Series::zeros(n_t, n_cfg);
    for tau in 0..n_t {
        let mean = threept_mean(sink, source, tsep, tau, p.pi, &r);
        let sigma = size
            * (g_f * (tsep - tau) as f64 + g_i * tau as f64).exp()
            * envelope(sink, source, tsep, tau);
        for c in 0..n_cfg {
            let i = s.index(tau, c);
            let shared = k * eta_twopt_sink[tsep * n_cfg + c];
            let (nr, ni) = if signal_in_re {
                (shared + own * eta_re[i], eta_im[i])
            } else {
                (eta_re[i], shared + own * eta_im[i])
            };
            s.re[i] = round(mean.re + sigma * nr, digits);
            s.im[i] = round(mean.im + sigma * ni, digits);
        }
    }
    s
}

/// Transition strengths when none are given: the ground state alone.
pub(super) fn ground_only(n_states: usize) -> Vec<Vec<f64>> {
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

fn truth(
    spec: &MockSpec,
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
    points: Vec<TruthPoint>,
    matrix_elements: Vec<TruthMatrixElement>,
) -> Truth {
    let h = &spec.hadron;
    Truth {
        generator: format!("formfactory {} mock", env!("CARGO_PKG_VERSION")),
        seed: spec.seed,
        lattice: TruthLattice {
            l: spec.ensemble.l,
            t: spec.ensemble.t,
            a_fm: spec.ensemble.a_fm.0,
        },
        configs: TruthConfigs {
            count: spec.ensemble.configs,
            first: spec.ensemble.first_config,
            step: spec.ensemble.config_step,
        },
        hadron: TruthHadron {
            kind: h.kind,
            dispersion: h.dispersion,
            masses: h.states.iter().map(|s| s.mass.0).collect(),
            overlaps_at_rest: h.states.iter().map(|s| s.overlap.0).collect(),
            smearing_width: h.smearing_width.0,
            m_pi: h.m_pi.map(|m| m.0),
            periodic: h.periodic,
        },
        spectrum: spectrum
            .values()
            .map(|s| TruthLevels {
                momentum: s.n,
                p: s.p,
                energies: s.levels.iter().map(|l| l.energy).collect(),
                overlaps: s.levels.iter().map(|l| l.overlap).collect(),
                amplitudes: s.levels.iter().map(|l| l.amplitude).collect(),
            })
            .collect(),
        form_factors: spec.form_factors.clone(),
        transitions: spec.transitions.clone(),
        points,
        matrix_elements,
        noise: spec.noise.clone(),
        operators: spec.operators.clone(),
    }
}

//! Assemble a mock ensemble: plan the channels, compute the noise-free means from the truth,
//! add the noise, and collect everything in the [`crate::data`] model and a [`Truth`].

use super::channels::momentum_pairs;
use super::matrix::{threept_matrix, twopt_matrix, twopt_noise};
use super::model::{form_factor, levels, FormFactorContext, MomentumLevels};
use super::series::{threept_series, twopt_series, unit_noise_for, Planned};
use super::spec::{BasisSpec, MockSpec};
use super::truth::{
    Truth, TruthConfigs, TruthHadron, TruthLattice, TruthLevels, TruthMatrixElement, TruthPoint,
};
use crate::data::{
    sub, Momentum, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use crate::kinematics::{self, OnShell};
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

/// Generate the ensemble described by `spec` (validated again here, so specs built in code
/// get the same checks as files).
pub fn generate(spec: &MockSpec) -> Result<MockEnsemble> {
    spec.validate()
        .map_err(|m| Error::config(format!("mock spec: {m}")))?;
    let pairs = momentum_pairs(&spec.channels.momenta);
    let momenta: BTreeSet<Momentum> = pairs.iter().flat_map(|&(pf, q)| [pf, sub(pf, q)]).collect();
    let spectrum = twisted_spectrum(spec, &pairs)?;
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
    basis: &BasisSpec,
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
    planned: &[Planned],
    configs: Vec<i64>,
) -> (TwoPointData, ThreePointData) {
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

/// The spectrum at every momentum of `pairs`, with the sink twist at sink momenta and the
/// source twist at source momenta; a momentum on both sides needs equal twists, since the
/// two-point table holds one function per integer momentum.
fn twisted_spectrum(
    spec: &MockSpec,
    pairs: &[(Momentum, Momentum)],
) -> Result<BTreeMap<Momentum, MomentumLevels>> {
    let e = &spec.ensemble;
    let mut twists: BTreeMap<Momentum, [f64; 3]> = BTreeMap::new();
    let sides = pairs
        .iter()
        .flat_map(|&(pf, q)| [(pf, e.twist_sink), (sub(pf, q), e.twist_source)]);
    for (n, twist) in sides {
        if *twists.entry(n).or_insert(twist) != twist {
            return Err(Error::config(format!(
                "mock spec: momentum {} is both a sink and a source momentum, so \
                 ensemble.twist_sink and ensemble.twist_source must be equal (the two-point \
                 table holds one function per momentum); choose sink momenta no source uses",
                crate::data::momentum_text(n)
            )));
        }
    }
    Ok(twists
        .into_iter()
        .map(|(n, twist)| (n, levels(&spec.hadron, e.l, n, twist)))
        .collect())
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
            twist_sink: spec.ensemble.twist_sink,
            twist_source: spec.ensemble.twist_source,
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

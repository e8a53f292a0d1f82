//! Correlator matrices of a mock operator basis ([`super::operators`]): the noisy
//! per-configuration two-point matrix at every momentum and the three-point functions
//! between every sink and source operator, labelled with `sink_op` / `source_op`.

use super::model::MomentumLevels;
use super::series::{growth, round, unit_noise_for, Planned, ThreePointSetup};
use super::spec::{BasisSpec, MockSpec};
use crate::data::{Momentum, Operators, Series, ThreePointKey, TwoPointKey};
use std::collections::BTreeMap;

/// Unit noise of element `(a, b)`: the shared part `common` with weight `k`, plus an own part
/// drawn from the stream named `label`.
fn mixed(spec: &MockSpec, common: &[f64], k: f64, label: &str, n_t: usize) -> Vec<f64> {
    let own = unit_noise_for(spec, label, n_t);
    let w = (1.0 - k * k).sqrt();
    common
        .iter()
        .zip(&own)
        .map(|(c, o)| k * c + w * o)
        .collect()
}

/// The unit noise of every two-point element at one momentum (`[a * n + b]`; symmetric pairs
/// share their own part).
pub(super) fn twopt_noise(spec: &MockSpec, basis: &BasisSpec, n: Momentum) -> Vec<Vec<f64>> {
    let t = spec.ensemble.t;
    let common = unit_noise_for(spec, &format!("twopt re {n:?}"), t);
    let k = basis.noise_correlation.0;
    let ops = &basis.basis;
    let mut out = Vec::with_capacity(ops.len() * ops.len());
    for a in 0..ops.len() {
        for b in 0..ops.len() {
            let (x, y) = (a.min(b), a.max(b));
            let label = format!("twopt re {n:?} ops {},{}", ops[x].name, ops[y].name);
            out.push(mixed(spec, &common, k, &label, t));
        }
    }
    out
}

/// The two-point matrix at one momentum.
pub(super) fn twopt_matrix(
    spec: &MockSpec,
    basis: &BasisSpec,
    levels: &MomentumLevels,
    noise: &[Vec<f64>],
) -> Vec<(TwoPointKey, Series)> {
    let (n_t, n_cfg) = (spec.ensemble.t, spec.ensemble.configs);
    let (w, size, digits) = (
        spec.hadron.smearing_width.0,
        spec.noise.twopt.0,
        spec.output.significant_digits,
    );
    let g = growth(spec, levels);
    let ops = &basis.basis;
    let mut out = Vec::new();
    for a in 0..ops.len() {
        for b in 0..ops.len() {
            let eta_re = &noise[a * ops.len() + b];
            let label = format!(
                "twopt im {:?} ops {},{}",
                levels.n, ops[a].name, ops[b].name
            );
            let eta_im = unit_noise_for(spec, &label, n_t);
            let mut s = Series::zeros(n_t, n_cfg);
            for t in 0..n_t {
                let mean = basis.twopt_mean(a, b, levels, w, t);
                let diag = (basis.twopt_mean(a, a, levels, w, t)
                    * basis.twopt_mean(b, b, levels, w, t))
                .abs()
                .sqrt();
                let sigma = size * (g * t as f64).exp() * diag;
                for c in 0..n_cfg {
                    let i = s.index(t, c);
                    s.re[i] = round(mean + sigma * eta_re[i], digits);
                    s.im[i] = round(sigma * eta_im[i], digits);
                }
            }
            let key = TwoPointKey {
                momentum: levels.n,
                smear: None,
                ops: Some(Operators::new(&ops[a].name, &ops[b].name)),
            };
            out.push((key, s));
        }
    }
    out
}

/// The three-point functions of one planned channel at one `tsep` between every sink and
/// source operator. `twopt_noise` is the sink momentum's two-point element noise (shared with
/// the three-point noise through `noise.twopt_threept_correlation`).
pub(super) fn threept_matrix(
    spec: &MockSpec,
    basis: &BasisSpec,
    spectrum: &BTreeMap<Momentum, MomentumLevels>,
    twopt_noise: &[Vec<f64>],
    tsep: usize,
    p: &Planned,
) -> Vec<(ThreePointKey, Series)> {
    let setup = ThreePointSetup::new(spec, spectrum, tsep, p);
    let (n_t, n_cfg, label) = (setup.n_t, spec.ensemble.configs, &setup.label);
    let (sink, source) = (setup.sink, setup.source);
    let w = spec.hadron.smearing_width.0;
    let k_ops = basis.noise_correlation.0;
    let common_re = unit_noise_for(spec, &format!("{label} re"), n_t);
    let common_im = unit_noise_for(spec, &format!("{label} im"), n_t);
    let (e_f, e_i) = (sink.levels[0].energy, source.levels[0].energy);
    let ops = &basis.basis;
    let mut out = Vec::new();
    for a in 0..ops.len() {
        for b in 0..ops.len() {
            let tag = format!("{label} ops {},{}", ops[a].name, ops[b].name);
            let eta_re = mixed(spec, &common_re, k_ops, &format!("{tag} re"), n_t);
            let eta_im = mixed(spec, &common_im, k_ops, &format!("{tag} im"), n_t);
            let eta2 = &twopt_noise[a * ops.len() + b];
            let scale = basis.norm(a, sink, w) * basis.norm(b, source, w);
            let mut s = Series::zeros(n_t, n_cfg);
            for tau in 0..n_t {
                let factor = basis.threept_factor((a, b), sink, source, w, tsep, tau, &setup.r);
                let mean = p.pi * factor;
                let decay = (-e_f * (tsep - tau) as f64 - e_i * tau as f64).exp();
                let sigma = setup.size * setup.noise_growth(tau) * scale * decay;
                setup.fill(&mut s, tau, mean, sigma, (&eta_re, &eta_im), eta2);
            }
            let key = ThreePointKey {
                tsep: tsep as u32,
                pf: p.pf,
                q: p.q,
                current: p.current,
                projector: p.projector,
                flavor: None,
                diagram: None,
                ops: Some(Operators::new(&ops[a].name, &ops[b].name)),
            };
            out.push((key, s));
        }
    }
    out
}

//! Form-factor decomposition: from the ratio plateaus of many channels to form factors per
//! Q² shell, by weighted least squares per resample (docs/methods.md §5).
//!
//! Within a shell (equal `|n_f|², |n_i|², |n_q|²` without twists, equal Q² within a tolerance
//! with twists) and a current kind, every channel gives `Pi_c = sum_k K_ck G_k` with complex
//! `K` from [`coefficients`]. Real and imaginary parts whose coefficients do not all vanish are
//! stacked into a real linear system, whitened by the data covariance (its diagonal or the
//! full or shrunk matrix, estimated once from the resamples and held fixed, common practice), and solved
//! by SVD on the central value and on every resample. Channels whose coefficients all vanish
//! are dropped and counted; form factors that no channel of the shell constrains are left out
//! of that shell.

use super::factors::{coefficients, FormFactor};
use super::momentum::q2_to_gev2;
use super::phase::Phase;
use super::setup::{at, EnergySource, KinematicSetup};
use crate::data::{norm2, sub, Current, CurrentKind, Momentum, Projector};
use crate::fit::{Weighting, Weights};
use crate::resample::Resampled;
use crate::{Error, Result};
use nalgebra::{Complex, DMatrix, DVector};
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// The large-time ratio of one channel for one excited-state method: a complex number given
/// as two resampled values.
#[derive(Clone, Debug, PartialEq)]
pub struct ChannelValue {
    /// Sink momentum (integer).
    pub pf: Momentum,
    /// Momentum transfer (integer); the source momentum is `pf - q`.
    pub q: Momentum,
    /// The inserted current.
    pub current: Current,
    /// The spin projector.
    pub projector: Projector,
    /// Real part.
    pub re: Resampled,
    /// Imaginary part.
    pub im: Resampled,
}

impl ChannelValue {
    /// A readable channel name for messages.
    pub fn label(&self) -> String {
        format!(
            "pf={} q={} {} {}",
            crate::data::momentum_text(self.pf),
            crate::data::momentum_text(self.q),
            self.current,
            self.projector
        )
    }
}

/// User settings of the decomposition.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, schemars::JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct DecompositionSettings {
    /// Energies of the kinematic factors: `fitted` (the two-point fit at every momentum;
    /// `fit` is read too), or the fitted mass with the `continuum` or `lattice` dispersion
    /// relation.
    #[serde(default)]
    pub energies: EnergySource,
    /// Weights of the least-squares solve.
    #[serde(default)]
    pub weights: Weighting,
    /// With twisted boundary conditions: channels whose Q² (lattice units, central value)
    /// differ by at most this much form one shell.
    #[serde(default = "default_q2_tolerance")]
    pub q2_tolerance: f64,
    /// Phase convention per current (`V1`, ..., `T34`): a complex unit (`1`, `-1`, `i`, `-i`)
    /// multiplying that current's data. Currents not listed keep phase 1.
    #[serde(default)]
    pub phases: BTreeMap<String, Phase>,
}

fn default_q2_tolerance() -> f64 {
    1e-6
}

impl DecompositionSettings {
    /// Check the tolerance and the current names of the phases.
    pub fn validate(&self) -> std::result::Result<(), crate::Invalid> {
        if !(self.q2_tolerance.is_finite() && self.q2_tolerance >= 0.0) {
            return Err(crate::Invalid::new(
                "q2_tolerance",
                format!(
                    "q2_tolerance = {} is not valid: expected zero or a positive number",
                    self.q2_tolerance
                ),
            ));
        }
        for name in self.phases.keys() {
            if Current::parse(name).is_none() {
                return Err(crate::Invalid::new(
                    format!("phases.{name}"),
                    Current::unknown(name),
                ));
            }
        }
        Ok(())
    }
}

impl Default for DecompositionSettings {
    fn default() -> Self {
        DecompositionSettings {
            energies: EnergySource::default(),
            weights: Weighting::default(),
            q2_tolerance: default_q2_tolerance(),
            phases: BTreeMap::new(),
        }
    }
}

/// The form factors of one Q² shell and one current kind.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ShellResult {
    /// The shell, e.g. `nf2=0 ni2=1 nq2=1` or `Q2=0.1234` with twists.
    pub label: String,
    /// Current kind of the channels.
    pub kind: CurrentKind,
    /// Q² in lattice units (mean over the shell's channels, per resample).
    pub q2: Resampled,
    /// Q² in GeV², when the lattice spacing is known.
    pub q2_gev2: Option<Resampled>,
    /// The solved form factors.
    pub form_factors: Vec<(FormFactor, Resampled)>,
    /// Channels used.
    pub n_channels: usize,
    /// Channels dropped because all their coefficients vanish.
    pub n_dropped: usize,
    /// Real equations minus form factors.
    pub dof: usize,
    /// `chi2 / dof` of the central solve; `None` when `dof = 0`.
    pub chi2_dof: Option<f64>,
    /// Condition number of the whitened coefficient matrix (central value): the largest
    /// singular value over the smallest one kept (above [`SINGULAR_THRESHOLD`] of the
    /// largest).
    pub condition: f64,
    /// Form factors the shell's channels do not determine (they mix with a direction whose
    /// singular value is below [`SINGULAR_THRESHOLD`] of the largest); not reported.
    pub undetermined: Vec<FormFactor>,
}

/// A singular value below this share of the largest counts as zero: the combination of form
/// factors along it is not determined by the shell's channels.
pub const SINGULAR_THRESHOLD: f64 = 1e-8;

/// A form factor is reported only if its overlap with the undetermined directions is below
/// this (the pseudo-inverse solution is then independent of them).
const NULL_OVERLAP: f64 = 1e-6;

/// A shell that could not be solved, and why.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SkippedShell {
    /// The shell.
    pub label: String,
    /// Current kind of the channels.
    pub kind: CurrentKind,
    /// What went wrong.
    pub reason: String,
}

/// All shells of one decomposition.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct Decomposition {
    /// Solved shells, ordered by current kind and Q².
    pub shells: Vec<ShellResult>,
    /// Shells that could not be solved (reported, not fatal).
    pub skipped: Vec<SkippedShell>,
}

/// Decompose the channel values of one excited-state method into form factors per Q² shell.
///
/// Errors are returned for inconsistent input (sample counts, unknown phase keys, missing
/// energies); a shell that cannot be solved (too few equations, zero variance, singular
/// system) is listed in [`Decomposition::skipped`] and the others carry on.
pub fn decompose(
    channels: &[ChannelValue],
    setup: &KinematicSetup,
    settings: &DecompositionSettings,
) -> Result<Decomposition> {
    let n = setup.validate()?;
    let phases = parse_phases(&settings.phases)?;
    for c in channels {
        for part in [&c.re, &c.im] {
            if part.len() != n || part.scheme != setup.mass.scheme {
                return Err(Error::analysis(
                    "kinematics",
                    format!(
                        "channel {} has {} samples ({:?}), the mass has {n} ({:?})",
                        c.label(),
                        part.len(),
                        part.scheme,
                        setup.mass.scheme
                    ),
                ));
            }
        }
    }
    let mut out = Decomposition::default();
    for (label, kind, members) in shells(channels, setup, settings.q2_tolerance)? {
        match solve_shell(&members, kind, setup, settings.weights, &phases, n) {
            Ok(mut r) => {
                r.label = label;
                out.shells.push(r);
            }
            Err(reason) => out.skipped.push(SkippedShell {
                label,
                kind,
                reason,
            }),
        }
    }
    Ok(out)
}

fn parse_phases(phases: &BTreeMap<String, Phase>) -> Result<BTreeMap<Current, Complex<f64>>> {
    phases
        .iter()
        .map(|(name, p)| {
            Current::parse(name).map(|c| (c, p.value())).ok_or_else(|| {
                Error::config(format!(
                    "decomposition phases: `{name}` is not a current; expected one of V1..V4, A1..A4, S, P, T12..T34"
                ))
            })
        })
        .collect()
}

type Shell<'a> = (String, CurrentKind, Vec<&'a ChannelValue>);

/// Group channels into Q² shells per current kind, in a deterministic order.
fn shells<'a>(
    channels: &'a [ChannelValue],
    setup: &KinematicSetup,
    tol: f64,
) -> Result<Vec<Shell<'a>>> {
    if !setup.is_twisted() {
        let mut map: BTreeMap<(CurrentKind, i32, i32, i32), Vec<&ChannelValue>> = BTreeMap::new();
        for c in channels {
            let key = (
                c.current.kind(),
                norm2(c.pf),
                norm2(sub(c.pf, c.q)),
                norm2(c.q),
            );
            map.entry(key).or_default().push(c);
        }
        return Ok(map
            .into_iter()
            .map(|((kind, f, i, q), v)| (format!("nf2={f} ni2={i} nq2={q}"), kind, v))
            .collect());
    }
    let mut keyed = channels
        .iter()
        .map(|c| {
            let k = setup.on_shell(c.pf, c.q, None)?;
            Ok((c.current.kind(), super::q_squared(&k), c))
        })
        .collect::<Result<Vec<_>>>()?;
    keyed.sort_by(|a, b| a.0.cmp(&b.0).then(a.1.total_cmp(&b.1)));
    let mut out: Vec<Shell<'a>> = Vec::new();
    let mut start = f64::NAN;
    for (kind, q2, c) in keyed {
        match out.last_mut() {
            Some(last) if last.1 == kind && (q2 - start).abs() <= tol => last.2.push(c),
            _ => {
                start = q2;
                out.push((format!("Q2={q2:.6}"), kind, vec![c]));
            }
        }
    }
    Ok(out)
}

/// One real equation: channel index and real (false) or imaginary (true) part.
type Row = (usize, bool);

/// Solve one shell; `Err` carries the reason it could not be solved.
fn solve_shell(
    members: &[&ChannelValue],
    kind: CurrentKind,
    setup: &KinematicSetup,
    weights: Weighting,
    phases: &BTreeMap<Current, Complex<f64>>,
    n: usize,
) -> std::result::Result<ShellResult, String> {
    let all = FormFactor::of(setup.hadron, kind);
    if all.is_empty() {
        return Err(format!(
            "a {:?} hadron has no form factors for a {kind:?} current",
            setup.hadron
        ));
    }
    if kind == CurrentKind::Tensor && members.iter().any(|c| c.q != [0, 0, 0]) {
        return Err(
            "the tensor vertex sigma_mu_nu g_T holds for forward matrix elements only (q = 0)"
                .into(),
        );
    }
    let coeffs =
        |c: &ChannelValue, s: Option<usize>| -> std::result::Result<Vec<Complex<f64>>, String> {
            let k = setup.on_shell(c.pf, c.q, s).map_err(|e| e.to_string())?;
            let list = coefficients(setup.hadron, c.projector, c.current, &k);
            Ok(if list.is_empty() {
                vec![Complex::new(0.0, 0.0); all.len()]
            } else {
                list.into_iter().map(|(_, v)| v).collect()
            })
        };
    // Structure from the central kinematics: which parts carry information, which form
    // factors are constrained at all.
    let mut rows: Vec<Row> = Vec::new();
    let mut used: Vec<usize> = Vec::new();
    let mut active = vec![false; all.len()];
    for (ci, c) in members.iter().enumerate() {
        let k = coeffs(c, None)?;
        let mut kept = false;
        for imag in [false, true] {
            let part = |z: &Complex<f64>| if imag { z.im } else { z.re };
            if k.iter().any(|z| part(z) != 0.0) {
                rows.push((ci, imag));
                kept = true;
                for (a, z) in active.iter_mut().zip(&k) {
                    *a |= part(z) != 0.0;
                }
            }
        }
        if kept {
            used.push(ci);
        }
    }
    let n_dropped = members.len() - used.len();
    let unknowns: Vec<usize> = (0..all.len()).filter(|&j| active[j]).collect();
    if unknowns.is_empty() {
        return Err(format!(
            "all {} channels have vanishing coefficients",
            members.len()
        ));
    }
    if rows.len() < unknowns.len() {
        return Err(format!(
            "{} real equations for {} form factors: add channels (other projectors or momenta)",
            rows.len(),
            unknowns.len()
        ));
    }
    // Data with the phase convention applied, one resampled value per row.
    let data: Vec<Resampled> = rows
        .iter()
        .map(|&(ci, imag)| {
            let c = members[ci];
            let ph = phases
                .get(&c.current)
                .copied()
                .unwrap_or(Complex::new(1.0, 0.0));
            c.re.zip_map(&c.im, |re, im| {
                let z = ph * Complex::new(re, im);
                if imag {
                    z.im
                } else {
                    z.re
                }
            })
        })
        .collect();
    let w = whitening(&data, &rows, members, weights)?;
    let mut central = BTreeMap::new();
    for &ci in &used {
        let c = members[ci];
        let k = setup.on_shell(c.pf, c.q, None).map_err(|e| e.to_string())?;
        central.insert(ci, (k, coeffs(c, None)?));
    }
    type Solved = (DVector<f64>, f64, f64, Vec<bool>, usize);
    let solve = |s: Option<usize>| -> std::result::Result<Solved, String> {
        let mut k = DMatrix::zeros(rows.len(), unknowns.len());
        // Coefficients per used channel; reuse the central ones when the kinematics of this
        // sample are the central kinematics (exact masses and energies).
        let mut cache: BTreeMap<usize, Vec<Complex<f64>>> = BTreeMap::new();
        for &ci in &used {
            let c = members[ci];
            let k = setup.on_shell(c.pf, c.q, s).map_err(|e| e.to_string())?;
            let kc = match central.get(&ci) {
                Some((k0, kc0)) if *k0 == k => kc0.clone(),
                _ => coeffs(c, s)?,
            };
            cache.insert(ci, kc);
        }
        for (r, &(ci, imag)) in rows.iter().enumerate() {
            let kc = &cache[&ci];
            for (col, &j) in unknowns.iter().enumerate() {
                k[(r, col)] = if imag { kc[j].im } else { kc[j].re };
            }
        }
        let y = DVector::from_iterator(rows.len(), data.iter().map(|d| at(d, s)));
        let a = w.whiten_matrix(&k);
        let mut b = DVector::zeros(rows.len());
        w.whiten(y.as_slice(), b.as_mut_slice());
        let which = || s.map_or("the central value".to_string(), |s| format!("resample {s}"));
        if a.iter().chain(b.iter()).any(|x| !x.is_finite()) {
            return Err(format!(
                "{}: the shell's equations hold a non-finite value (a NaN or infinite energy, \
                 kinematic factor or matrix element from an earlier stage)",
                which()
            ));
        }
        // The unordered decomposition never sorts, so it cannot panic on a NaN singular value.
        let svd = nalgebra::SVD::try_new_unordered(a.clone(), true, true, f64::EPSILON, 10_000)
            .ok_or_else(|| format!("{}: the decomposition's SVD did not converge", which()))?;
        let smax = svd.singular_values.max();
        if svd.singular_values.iter().any(|v| !v.is_finite()) {
            return Err(format!(
                "{}: the decomposition's SVD gave a non-finite singular value",
                which()
            ));
        }
        if smax <= 0.0 {
            return Err("the coefficient matrix is zero".into());
        }
        let cut = smax * SINGULAR_THRESHOLD;
        let kept_min = svd
            .singular_values
            .iter()
            .copied()
            .filter(|v| *v > cut)
            .fold(f64::INFINITY, f64::min);
        let g = svd.solve(&b, cut).map_err(|e| e.to_string())?;
        let chi2 = (&a * &g - &b).norm_squared();
        let null: Vec<usize> = (0..svd.singular_values.len())
            .filter(|&i| svd.singular_values[i] <= cut)
            .collect();
        let v_t = svd
            .v_t
            .as_ref()
            .ok_or("the SVD gave no right singular vectors")?;
        let determined: Vec<bool> = (0..unknowns.len())
            .map(|col| {
                null.iter()
                    .map(|&i| v_t[(i, col)].powi(2))
                    .sum::<f64>()
                    .sqrt()
                    < NULL_OVERLAP
            })
            .collect();
        Ok((g, chi2, smax / kept_min, determined, null.len()))
    };
    let (g0, chi2, condition, determined, n_null) = solve(None)?;
    if !determined.iter().any(|d| *d) {
        return Err(format!(
            "the coefficient matrix is singular: the channels determine none of {} alone (needs another q direction or projector)",
            names(unknowns.iter().map(|&j| all[j]))
        ));
    }
    let per_sample = (0..n)
        .into_par_iter()
        .map(|s| solve(Some(s)).map(|(g, ..)| g))
        .collect::<std::result::Result<Vec<_>, String>>()?;
    let samples: Vec<Vec<f64>> = (0..unknowns.len())
        .map(|col| per_sample.iter().map(|g| g[col]).collect())
        .collect();
    let scheme = setup.mass.scheme;
    let form_factors = unknowns
        .iter()
        .zip(samples)
        .enumerate()
        .filter(|(col, _)| determined[*col])
        .map(|(col, (&j, smp))| (all[j], Resampled::new(g0[col], smp, scheme)))
        .collect();
    let undetermined = unknowns
        .iter()
        .zip(&determined)
        .filter(|(_, d)| !**d)
        .map(|(&j, _)| all[j])
        .collect();
    let q2s = used
        .iter()
        .map(|&ci| {
            setup
                .q2(members[ci].pf, members[ci].q)
                .map_err(|e| e.to_string())
        })
        .collect::<std::result::Result<Vec<_>, _>>()?;
    let refs: Vec<&Resampled> = q2s.iter().collect();
    let q2 = Resampled::try_combine(&refs, "Q² of the shell's channels", |v| {
        v.iter().sum::<f64>() / v.len() as f64
    })
    .map_err(|e| e.to_string())?;
    // Elastic form factors are spacelike: Q² = |q|² - (E_f - E_i)² >= 0 for energies that obey
    // any dispersion relation. A negative Q² means an unphysical energy (e.g. a spurious fitted
    // ground state); the shell is skipped, naming the momenta.
    if q2.central < -1e-12 {
        let c = members[used[0]];
        return Err(format!(
            "Q² = {:.4e} < 0 (timelike) at p_f = {:?}, p_i = {:?}: the energies are unphysical \
             for an elastic form factor; check the spectrum fits of these momenta",
            q2.central,
            c.pf,
            sub(c.pf, c.q)
        ));
    }
    let dof = rows.len() - (unknowns.len() - n_null);
    Ok(ShellResult {
        label: String::new(),
        kind,
        q2_gev2: setup.spacing_fm.map(|a| q2.map(|x| q2_to_gev2(x, a))),
        q2,
        form_factors,
        n_channels: used.len(),
        n_dropped,
        dof,
        chi2_dof: (dof > 0).then(|| chi2 / dof as f64),
        condition,
        undetermined,
    })
}

fn names(list: impl Iterator<Item = FormFactor>) -> String {
    list.map(|f| f.name()).collect::<Vec<_>>().join(", ")
}

/// Whitening of the stacked parts: inverse errors, or the (shrunk) covariance estimated from
/// the resamples (`resample::covariance`), inverted by `fit::Weights`.
fn whitening(
    data: &[Resampled],
    rows: &[Row],
    members: &[&ChannelValue],
    weights: Weighting,
) -> std::result::Result<Weights, String> {
    for (d, &(ci, imag)) in data.iter().zip(rows) {
        let v = d.variance();
        if !(v > 0.0 && v.is_finite()) {
            return Err(format!(
                "channel {} ({} part) has variance {v}; positive finite variance expected",
                members[ci].label(),
                if imag { "imaginary" } else { "real" }
            ));
        }
    }
    weights.weights(data).map_err(|e| {
        format!(
            "{e} ({} stacked parts, {} samples); use diagonal or shrinkage weights",
            data.len(),
            data[0].len()
        )
    })
}

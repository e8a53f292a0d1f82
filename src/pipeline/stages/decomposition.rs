//! The decomposition stage as the runner drives it: every selected estimator's channel
//! values decomposed into form factors per Q² shell, renormalized, with the shells that
//! could not be solved (or not fully) turned into warnings.

use crate::kinematics::{self, ChannelValue, KinematicSetup, ShellResult};
use crate::kinematics::{renormalize, ZFactors};
use crate::pipeline::observer::Recorder;
use crate::pipeline::plan::Plan;
use crate::pipeline::results::{FormFactorRow, RunResults};
use crate::ratio::{ChannelKey, ChannelResult, Estimator};
use crate::{Error, Result};
use std::collections::BTreeMap;

/// Every selected estimator's channel values, in estimator order.
fn method_values(
    methods: &[Estimator],
    channels: &BTreeMap<ChannelKey, ChannelResult>,
) -> Vec<(Estimator, Vec<ChannelValue>)> {
    let mut out: BTreeMap<Estimator, Vec<ChannelValue>> = BTreeMap::new();
    for (k, c) in channels {
        for (e, fit) in c.estimates() {
            if methods.iter().any(|m| m.with_companions(e)) {
                out.entry(e).or_default().push(ChannelValue {
                    pf: k.pf,
                    q: k.q,
                    current: k.current,
                    projector: k.projector,
                    re: fit.value.re.clone(),
                    im: fit.value.im.clone(),
                });
            }
        }
    }
    out.into_iter().collect()
}

/// The plateau at the largest `tsep` among the rows.
pub(in crate::pipeline) fn largest_plateau(rows: &[FormFactorRow]) -> Option<Estimator> {
    rows.iter()
        .map(|r| r.method)
        .filter(|m| m.tsep().is_some())
        .max()
}

/// Decompose the ratio stage's channel values of every selected estimator.
pub(in crate::pipeline) fn decompose_all(
    plan: &Plan,
    results: &RunResults,
    rec: &mut Recorder,
) -> Result<Vec<FormFactorRow>> {
    let spec = &plan.spec;
    let (Some(sp), Some(channels)) = (&results.spectrum, &results.channels) else {
        return Err(Error::analysis(
            "decomposition",
            "the decomposition needs the spectrum and ratio stages",
        ));
    };
    let mass = sp.mass.clone().ok_or_else(|| {
        Error::analysis(
            "decomposition",
            "no two-point data at momentum (0,0,0): the hadron mass is unknown",
        )
    })?;
    let d = &spec.decomposition;
    let fitted = sp
        .per_momentum
        .iter()
        .map(|(p, m)| (*p, m.ground_energy().clone()))
        .collect();
    let setup = KinematicSetup {
        hadron: spec.ensemble.hadron,
        l: spec.ensemble.l as usize,
        twist_sink: spec.ensemble.sink_twist(),
        twist_source: spec.ensemble.source_twist(),
        mass,
        energies: d.energies.energies(fitted),
        spacing_fm: Some(spec.ensemble.spacing_fm),
    };
    let mut rows = Vec::new();
    let mut shell_warnings = SharedWarnings::default();
    let by_method = method_values(&spec.excited_states.methods, channels);
    // One setup for every method: their kinematic coefficients are computed once.
    let cache = kinematics::CoefficientCache::new();
    let total = by_method.len();
    for (i, (method, values)) in by_method.into_iter().enumerate() {
        rec.observer.progress("decomposition", i, total);
        if values.is_empty() {
            rec.warn(format!("decomposition {method}: no channel has a value"));
            continue;
        }
        let dec = kinematics::decompose_cached(&values, &setup, d, &cache)?;
        for s in &dec.skipped {
            shell_warnings.add(
                method,
                format!("shell {} ({:?}) skipped: {}", s.label, s.kind, s.reason),
            );
        }
        for shell in &dec.shells {
            if !shell.undetermined.is_empty() {
                let names: Vec<&str> = shell.undetermined.iter().map(|f| f.name()).collect();
                shell_warnings.add(
                    method,
                    format!(
                        "shell {} ({:?}) does not determine {} (a singular value below {:e} of the largest): not reported; needs another q direction or projector",
                        shell.label,
                        shell.kind,
                        names.join(", "),
                        kinematics::SINGULAR_THRESHOLD
                    ),
                );
            }
            rows.extend(shell_rows(method, shell, &spec.renormalization));
        }
    }
    for w in shell_warnings.lines() {
        rec.warn(w);
    }
    Ok(rows)
}

/// Warnings about a shell, each said once with every estimator it concerns: a shell's
/// kinematics are the same for all estimators, so a singular shell is singular for each.
#[derive(Default)]
struct SharedWarnings {
    /// In the order first seen: the message and the estimators that gave it.
    entries: Vec<(String, Vec<Estimator>)>,
}

impl SharedWarnings {
    fn add(&mut self, method: Estimator, message: String) {
        match self.entries.iter_mut().find(|(m, _)| *m == message) {
            Some((_, methods)) => methods.push(method),
            None => self.entries.push((message, vec![method])),
        }
    }

    /// `decomposition two_state: ...`, or `decomposition (plateau_tsep8, two_state): ...`.
    fn lines(&self) -> Vec<String> {
        self.entries
            .iter()
            .map(|(message, methods)| {
                let names: Vec<String> = methods.iter().map(|m| m.to_string()).collect();
                match names.as_slice() {
                    [one] => format!("decomposition {one}: {message}"),
                    _ => format!("decomposition ({}): {message}", names.join(", ")),
                }
            })
            .collect()
    }
}

fn shell_rows(method: Estimator, shell: &ShellResult, z: &ZFactors) -> Vec<FormFactorRow> {
    shell
        .form_factors
        .iter()
        .map(|(ff, v)| FormFactorRow {
            method,
            form_factor: *ff,
            kind: shell.kind,
            shell: shell.label.clone(),
            q2: shell.q2.clone(),
            q2_gev2: shell.q2_gev2.clone(),
            value: renormalize(v, z.get(shell.kind)),
            n_channels: shell.n_channels,
            chi2_dof: shell.chi2_dof,
            condition: shell.condition,
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_shell_warning_is_said_once_with_every_estimator() {
        let mut w = SharedWarnings::default();
        w.add(Estimator::plateau_at(8), "shell A singular".into());
        w.add(Estimator::Summation, "shell B skipped".into());
        w.add(Estimator::TwoState, "shell A singular".into());
        assert_eq!(
            w.lines(),
            [
                "decomposition (plateau_tsep8, two_state): shell A singular",
                "decomposition summation: shell B skipped",
            ]
        );
    }
}

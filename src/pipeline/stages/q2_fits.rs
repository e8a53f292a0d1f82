//! The Q² fits as the runner drives them: one fit per estimator, form factor and listed
//! model (plateaus at the largest `tsep` only), then the derived quantities (`G(0)`, radii,
//! and the Dirac and Pauli radii and `kappa` from the Sachs fits).

use super::decomposition::largest_plateau;
use crate::kinematics::FormFactor;
use crate::pipeline::observer::Recorder;
use crate::pipeline::plan::Plan;
use crate::pipeline::results::{DerivedRow, FormFactorRow, Q2FitResult};
use crate::q2::{self, Q2Model, Q2Point, Q2Units};
use crate::ratio::Estimator;
use crate::resample::Resampled;
use std::collections::BTreeMap;

/// Fit each listed form factor of every method (plateaus: the largest `tsep` only); a fit
/// that fails becomes a warning.
pub(in crate::pipeline) fn q2_fits(
    plan: &Plan,
    rows: &[FormFactorRow],
    rec: &mut Recorder,
) -> Vec<Q2FitResult> {
    let spec = &plan.spec;
    let largest = largest_plateau(rows);
    let mut groups: BTreeMap<(Estimator, FormFactor), Vec<Q2Point>> = BTreeMap::new();
    for r in rows {
        if r.method.tsep().is_some() && Some(r.method) != largest {
            continue;
        }
        if !spec.q2_fits.form_factors.contains_key(&r.form_factor) {
            continue;
        }
        groups
            .entry((r.method, r.form_factor))
            .or_default()
            .push(Q2Point {
                q2: r.q2.clone(),
                value: r.value.value.clone(),
            });
    }
    let units = Q2Units::Lattice {
        spacing_fm: Some(spec.ensemble.spacing_fm),
    };
    let mut out = Vec::new();
    let total = groups.len();
    for (i, ((method, ff), points)) in groups.into_iter().enumerate() {
        rec.observer.progress("q2_fits", i, total);
        let list = &spec.q2_fits.form_factors[&ff];
        for (i, settings) in list.iter().enumerate() {
            let base = match settings.model {
                Q2Model::Dipole { .. } => "dipole",
                Q2Model::ZExpansion { .. } => "z-expansion",
            };
            let same = list
                .iter()
                .filter(|s| {
                    std::mem::discriminant(&s.model) == std::mem::discriminant(&settings.model)
                })
                .count();
            let model = if same > 1 {
                format!("{base}-{}", i + 1)
            } else {
                base.to_string()
            };
            match q2::fit(&points, settings, units) {
                Ok(fit) => {
                    for w in &fit.warnings {
                        rec.warn(format!("q2_fits {method} {ff} {model}: {w}"));
                    }
                    if fit.n_failed > 0 {
                        rec.warn(format!(
                            "q2_fits {method} {ff} {model}: {} resample fit(s) did not converge",
                            fit.n_failed
                        ));
                    }
                    if let (Some(r2), None) = (&fit.r2_fm2, fit.radius_fm()) {
                        let below = r2.samples.iter().filter(|x| **x <= 0.0).count();
                        rec.warn(format!(
                            "q2_fits {method} {ff} {model}: r_{ff} not reported: r2 = {:.4} fm^2 \
                             is not positive on the central value or on {below} of {} resamples \
                             (r2_{ff} in derived.csv has its value and error)",
                            r2.central,
                            r2.samples.len()
                        ));
                    }
                    let z = spec.renormalization.get(ff.current_kind());
                    out.push(Q2FitResult {
                        method,
                        form_factor: ff,
                        model,
                        fit,
                        z_relative_error: (z.error / z.value).abs(),
                    });
                }
                Err(e) => rec.warn(format!("q2_fits {method} {ff} {model}: {e}")),
            }
        }
    }
    out
}

/// `G(0)`, `r²` (fm²) and `r` (fm) of one fit.
pub(in crate::pipeline) fn derived_rows(f: &Q2FitResult) -> Vec<DerivedRow> {
    let ff = f.form_factor.name();
    let row = |quantity: String, value: Resampled, z_rel: f64, unit: &str| DerivedRow {
        method: f.method,
        model: f.model.clone(),
        quantity,
        error_total: value.error().hypot(value.central * z_rel),
        value,
        unit: unit.to_string(),
    };
    // G(0) scales with Z; radii do not
    let mut out = vec![row(
        format!("{ff}(0)"),
        f.fit.g0.clone(),
        f.z_relative_error,
        "",
    )];
    if let Some(r2) = &f.fit.r2_fm2 {
        out.push(row(format!("r2_{ff}"), r2.clone(), 0.0, "fm^2"));
    }
    if let Some(r) = f.fit.radius_fm() {
        out.push(row(format!("r_{ff}"), r, 0.0, "fm"));
    }
    out
}

/// `kappa`, `r1²`, `r2²` (fm²) and `r1`, `r2` (fm) per method and model from the G_E and G_M
/// fits of the same method and model (`q2::dirac_pauli_radii`).
pub(in crate::pipeline) fn dirac_pauli_rows(
    fits: &[Q2FitResult],
    mass: &Resampled,
    rec: &mut Recorder,
) -> Vec<DerivedRow> {
    let mut out = Vec::new();
    for ge in fits.iter().filter(|f| f.form_factor == FormFactor::GE) {
        let Some(gm) = fits.iter().find(|f| {
            f.form_factor == FormFactor::GM && f.method == ge.method && f.model == ge.model
        }) else {
            continue;
        };
        let dp = match q2::dirac_pauli_radii(&ge.fit, &gm.fit, mass) {
            Ok(dp) => dp,
            Err(e) => {
                rec.warn(format!(
                    "q2_fits {} {}: Dirac/Pauli radii: {e}",
                    ge.method, ge.model
                ));
                continue;
            }
        };
        let row = |quantity: &str, value: Resampled, unit: &str| DerivedRow {
            method: ge.method,
            model: ge.model.clone(),
            quantity: quantity.to_string(),
            error_total: value.error(),
            value,
            unit: unit.to_string(),
        };
        // kappa = G_M(0) - G_E(0) scales with Z (the vector current's, shared by both)
        let z_rel = ge.z_relative_error;
        let mut kappa = row("kappa", dp.kappa.clone(), "");
        kappa.error_total = kappa.error_total.hypot(kappa.value.central * z_rel);
        out.push(kappa);
        for (name, r2) in [("r1", dp.r1_2_fm2), ("r2", dp.r2_2_fm2)] {
            let Some(r2) = r2 else { continue };
            let positive = r2.central > 0.0 && r2.samples.iter().all(|x| *x > 0.0);
            if positive {
                out.push(row(name, r2.sqrt(), "fm"));
            }
            out.push(row(&format!("{name}^2"), r2, "fm^2"));
        }
    }
    out
}

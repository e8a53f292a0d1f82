//! The combination step: gather every quantity from every finished run, fit it per variant
//! against a² and m_π² ([`super::fit`]), and turn the spread over variants into a systematic
//! error. Runs that failed or never ran are left out with a warning; the rest combine.
//!
//! Result at the physical point: the base variant's value (the first option of every axis)
//! with its super-jackknife error as the statistical error; the systematic error is the
//! largest deviation of another variant's value from it (0 with one variant), added in
//! quadrature for the total.

use super::expand::{tasks, variants, Task};
use super::fit::{extrapolate, Extrapolation, Form, Point};
use super::gather::read_quantity;
use super::load::Campaign;
use super::local::{status, State};
use super::spec::QuantitySpec;
use crate::Result;

/// One quantity fitted on one variant.
#[derive(Clone, Debug)]
pub struct VariantFit {
    /// Variant name.
    pub variant: String,
    /// The points that went in.
    pub points: Vec<Point>,
    /// The fit, or why there is none.
    pub fit: std::result::Result<Extrapolation, String>,
}

/// One quantity over all variants.
#[derive(Clone, Debug)]
pub struct QuantityResult {
    /// What was asked.
    pub spec: QuantitySpec,
    /// Unit of the quantity (from the fm power of the runs' unit).
    pub unit: String,
    /// Per variant, base first.
    pub fits: Vec<VariantFit>,
}

impl QuantityResult {
    /// A readable name: the quantity, at Q² if chosen, with method and model.
    pub fn name(&self) -> String {
        name_of(&self.spec)
    }

    /// (value, statistical, systematic) at the physical point, from the base variant;
    /// `None` when the base variant has no fit.
    pub fn physical(&self) -> Option<(f64, f64, f64)> {
        let base = self.fits.first()?.fit.as_ref().ok()?;
        let v = base.value();
        let sys = self
            .fits
            .iter()
            .filter_map(|f| f.fit.as_ref().ok())
            .map(|f| (f.value() - v).abs())
            .fold(0.0, f64::max);
        Some((v, base.error(), sys))
    }
}

/// A readable name of a quantity spec.
pub fn name_of(q: &QuantitySpec) -> String {
    match q.q2_gev2 {
        Some(q2) => format!("{}(Q2={q2}) [{}]", q.quantity, q.method),
        None => format!("{} [{}, {}]", q.quantity, q.method, q.model),
    }
}

/// Everything the combination produced.
#[derive(Clone, Debug)]
pub struct Combination {
    /// Per quantity.
    pub quantities: Vec<QuantityResult>,
    /// Tasks that were used (`ensemble/variant`).
    pub used: Vec<Task>,
    /// Warnings (runs left out, fits that failed).
    pub warnings: Vec<String>,
}

/// Gather and fit every quantity of the campaign.
pub fn combine(c: &Campaign) -> Result<Combination> {
    let all = tasks(c);
    let mut warnings = Vec::new();
    let mut used = Vec::new();
    for t in &all {
        let st = status(c, t)?;
        match st.state {
            State::Done => used.push(t.clone()),
            State::Stale => {
                warnings.push(format!(
                    "run {} is stale ({}): combined as it is",
                    t.label(),
                    st.detail
                ));
                used.push(t.clone());
            }
            State::Failed | State::Pending => warnings.push(format!(
                "run {} is {}: left out of the combination{}",
                t.label(),
                st.state.name(),
                if st.detail.is_empty() {
                    String::new()
                } else {
                    format!(" ({})", st.detail.lines().next().unwrap_or(""))
                }
            )),
        }
    }
    let form_of = |q: &QuantitySpec| Form {
        form: q.form,
        volume: q.volume,
        mpi_phys: c.spec.combine.physical_point.pion_mass_gev,
    };
    let mut quantities = Vec::new();
    for q in &c.spec.combine.quantities {
        let mut fits = Vec::new();
        let mut fm_power = 0;
        for (variant, _) in variants(c) {
            let mut points = Vec::new();
            for t in used.iter().filter(|t| t.variant == variant) {
                let e = &c.spec.ensembles[t.ensemble];
                match read_quantity(&t.run_dir, q) {
                    Ok((value, power)) => {
                        fm_power = power;
                        points.push(Point {
                            ensemble: e.name.clone(),
                            spacing_fm: e.spacing_fm,
                            pion_mass: e.pion_mass,
                            l: e.l,
                            value,
                            fm_power: power,
                        });
                    }
                    Err(err) => warnings.push(format!(
                        "{} from run {}: {err}; left out",
                        name_of(q),
                        t.label()
                    )),
                }
            }
            let fit = extrapolate(&points, form_of(q)).map_err(|e| e.to_string());
            if let Err(e) = &fit {
                warnings.push(format!("{} on variant {variant}: {e}", name_of(q)));
            }
            fits.push(VariantFit {
                variant,
                points,
                fit,
            });
        }
        quantities.push(QuantityResult {
            spec: q.clone(),
            unit: match fm_power {
                0 => String::new(),
                1 => "fm".into(),
                p => format!("fm^{p}"),
            },
            fits,
        });
    }
    Ok(Combination {
        quantities,
        used,
        warnings,
    })
}

//! Reading and validating a campaign file into a [`Campaign`]: parse with the pipeline's
//! position machinery (errors quote file:line:column and suggest the near miss of a misspelt
//! key), resolve paths against the campaign file, check names, values and overrides.

use super::spec::{CampaignSpec, FitForm};
use crate::pipeline::yaml::{self, Positions};
use crate::{Error, Result};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// A validated campaign with its paths resolved.
#[derive(Clone, Debug)]
pub struct Campaign {
    /// The campaign file.
    pub source: PathBuf,
    /// SHA-256 of the campaign file's bytes.
    pub source_sha256: String,
    /// The parsed file.
    pub spec: CampaignSpec,
    /// The base pipeline, resolved.
    pub pipeline: PathBuf,
    /// The campaign directory, resolved.
    pub output: PathBuf,
    /// Per ensemble: (two-point table, three-point table), resolved.
    pub data: Vec<(PathBuf, PathBuf)>,
    /// Key positions, for errors found later.
    pub positions: Positions,
}

impl Campaign {
    /// A configuration error about the key at `path`, with its location.
    pub fn error(&self, path: &str, message: impl std::fmt::Display) -> Error {
        self.positions.error(path, message)
    }
}

/// Read, parse and validate a campaign file (data files must exist; they are not read).
pub fn load(path: &Path) -> Result<Campaign> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, e))?;
    let text = String::from_utf8(bytes.clone())
        .map_err(|_| Error::config(format!("{}: the file is not UTF-8 text", path.display())))?;
    yaml::check_flow_depth(&path.display().to_string(), &text)?;
    let positions = Positions::scan(path, &text);
    let spec: CampaignSpec =
        serde_yaml_ng::from_str(&text).map_err(|e| yaml::translate(&e, &positions))?;
    let base = path.parent().unwrap_or(Path::new("")).to_path_buf();
    let resolve = |p: &Path| {
        if p.is_absolute() {
            p.to_path_buf()
        } else {
            base.join(p)
        }
    };
    let campaign = Campaign {
        source: path.to_path_buf(),
        source_sha256: crate::report::manifest::sha256_hex(&bytes),
        pipeline: resolve(&spec.pipeline),
        output: resolve(&spec.output),
        data: spec
            .ensembles
            .iter()
            .map(|e| (resolve(&e.twopt), resolve(&e.threept)))
            .collect(),
        spec,
        positions,
    };
    validate(&campaign)?;
    Ok(campaign)
}

/// Whether `s` is a usable name in directory and file names.
fn is_name(s: &str) -> bool {
    !s.is_empty()
        && s.len() <= 64
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.')
        && !s.starts_with('.')
}

fn check_name(c: &Campaign, key: &str, name: &str) -> Result<()> {
    if is_name(name) {
        Ok(())
    } else {
        Err(c.error(
            key,
            format!("`{name}` is not a usable name: expected 1 to 64 letters, digits, `-`, `_` or `.`, not starting with `.`"),
        ))
    }
}

fn check_sets(c: &Campaign, key: &str, sets: &[String]) -> Result<()> {
    for (i, s) in sets.iter().enumerate() {
        if !s.contains('=') {
            return Err(c.error(
                &format!("{key}[{i}]"),
                format!("`{s}`: expected KEY=VALUE with a dotted key path of the pipeline, e.g. `resampling.bin_size=2`"),
            ));
        }
    }
    Ok(())
}

fn validate(c: &Campaign) -> Result<()> {
    let s = &c.spec;
    check_name(c, "name", &s.name)?;
    if !c.pipeline.is_file() {
        return Err(c.error(
            "pipeline",
            format!(
                "the base pipeline `{}` does not exist",
                c.pipeline.display()
            ),
        ));
    }
    if s.parallel == 0 {
        return Err(c.error("parallel", "expected at least one run at a time"));
    }
    if s.ensembles.is_empty() {
        return Err(c.error("ensembles", "expected at least one ensemble"));
    }
    let mut names = BTreeSet::new();
    for (i, e) in s.ensembles.iter().enumerate() {
        let key = format!("ensembles[{i}]");
        check_name(c, &format!("{key}.name"), &e.name)?;
        if !names.insert(e.name.as_str()) {
            return Err(c.error(
                &format!("{key}.name"),
                format!("the ensemble name `{}` is used twice", e.name),
            ));
        }
        for (field, p) in [("twopt", &c.data[i].0), ("threept", &c.data[i].1)] {
            if !p.is_file() {
                return Err(c.error(
                    &format!("{key}.{field}"),
                    format!("the data file `{}` does not exist", p.display()),
                ));
            }
        }
        let a = e.spacing_fm;
        if !(a.value.is_finite() && a.value > 0.0) {
            return Err(c.error(
                &format!("{key}.spacing_fm.value"),
                format!("spacing {}: expected a positive number of fm", a.value),
            ));
        }
        if !(a.error.is_finite() && a.error >= 0.0 && a.error < a.value) {
            return Err(c.error(
                &format!("{key}.spacing_fm.error"),
                format!("error {}: expected 0 <= error < spacing", a.error),
            ));
        }
        if !(e.pion_mass.is_finite() && e.pion_mass > 0.0) {
            return Err(c.error(
                &format!("{key}.pion_mass"),
                format!(
                    "pion mass {}: expected a positive number (lattice units)",
                    e.pion_mass
                ),
            ));
        }
        if e.l == 0 || e.t == 0 {
            return Err(c.error(&key, "L and T must be positive"));
        }
        check_sets(c, &format!("{key}.set"), &e.set)?;
    }
    let mut axes = BTreeSet::new();
    for (i, axis) in s.variants.iter().enumerate() {
        let key = format!("variants[{i}]");
        check_name(c, &format!("{key}.axis"), &axis.axis)?;
        if !axes.insert(axis.axis.as_str()) {
            return Err(c.error(
                &format!("{key}.axis"),
                format!("the axis `{}` is listed twice", axis.axis),
            ));
        }
        if axis.options.is_empty() {
            return Err(c.error(&format!("{key}.options"), "expected at least one option"));
        }
        let mut labels = BTreeSet::new();
        for (j, o) in axis.options.iter().enumerate() {
            let okey = format!("{key}.options[{j}]");
            check_name(c, &format!("{okey}.label"), &o.label)?;
            if !labels.insert(o.label.as_str()) {
                return Err(c.error(
                    &format!("{okey}.label"),
                    format!("the option `{}` is listed twice", o.label),
                ));
            }
            check_sets(c, &format!("{okey}.set"), &o.set)?;
        }
    }
    validate_combine(c)
}

fn validate_combine(c: &Campaign) -> Result<()> {
    let combine = &c.spec.combine;
    let m = combine.physical_point.pion_mass_gev;
    if !(m.is_finite() && m > 0.0) {
        return Err(c.error(
            "combine.physical_point.pion_mass_gev",
            format!("{m}: expected a positive pion mass in GeV"),
        ));
    }
    for (i, q) in combine.quantities.iter().enumerate() {
        let key = format!("combine.quantities[{i}]");
        if let Some(q2) = q.q2_gev2 {
            if !(q2.is_finite() && q2 >= 0.0) {
                return Err(c.error(
                    &format!("{key}.q2_gev2"),
                    format!("{q2}: expected Q² >= 0 in GeV²"),
                ));
            }
        }
        if q.form != FitForm::Linear && (q.q2_gev2.is_some() || !q.quantity.starts_with("r2_")) {
            return Err(c.error(
                &format!("{key}.form"),
                format!(
                    "the chiral-logarithm forms describe squared radii (`r2_…` in fm²), not `{}`",
                    q.quantity
                ),
            ));
        }
        let n_params = super::fit::n_params(q);
        let n = c.spec.ensembles.len();
        if n < n_params {
            return Err(c.error(
                &key,
                format!("this fit has {n_params} parameters but the campaign has {n} ensembles"),
            ));
        }
    }
    Ok(())
}

//! The second settings step: a validated [`Plan`] built from the parsed spec before any
//! computation. Every path is resolved against the pipeline file, every range checked, every
//! name looked up; an error quotes the YAML line and column of the offending key (or the
//! `--set` argument that set it) and says what would be valid.

use super::spec::{PipelineSpec, ResamplingMethod, Stage};
use super::yaml::{self, Positions};
use crate::data::{Current, CurrentKind};
use crate::kinematics::DecompositionSettings;
use crate::kinematics::{FormFactor, Hadron};
use crate::ratio::{Estimator, RatioSettings};
use crate::spectrum::SpectrumSettings;
use crate::{Error, Result};
use sha2::{Digest, Sha256};
use std::path::{Path, PathBuf};

/// A validated analysis, ready to run.
#[derive(Clone, Debug)]
pub struct Plan {
    /// The pipeline file.
    pub source: PathBuf,
    /// SHA-256 of the pipeline file's bytes (hex).
    pub source_sha256: String,
    /// The fully resolved settings (file, defaults and `--set` overrides).
    pub spec: PipelineSpec,
    /// `--set` arguments applied, in order.
    pub overrides: Vec<String>,
    /// Two-point table, resolved.
    pub twopt: PathBuf,
    /// Three-point table, resolved.
    pub threept: PathBuf,
    /// Run directory, resolved (`--out` replaces it via [`Plan::with_out_dir`]).
    pub out_dir: PathBuf,
    /// The last stage that runs (from `stop_after` and the `enabled` switches).
    pub last_stage: Stage,
    /// Key positions, for errors found later against the data.
    pub positions: Positions,
    /// Replace an existing run directory.
    pub force: bool,
    /// Worker threads (`None`: rayon's default).
    pub jobs: Option<usize>,
}

impl Plan {
    /// Whether `stage` runs.
    pub fn runs(&self, stage: Stage) -> bool {
        stage <= self.last_stage
    }

    /// The same plan writing to `dir` instead of `output.dir`.
    pub fn with_out_dir(mut self, dir: PathBuf) -> Self {
        self.out_dir = dir;
        self
    }

    /// A configuration error about the key at `path`, with its location.
    pub fn error(&self, path: &str, message: impl std::fmt::Display) -> Error {
        self.positions.error(path, message)
    }
}

/// Read, parse and validate a pipeline file with `--set` overrides; checks that the data
/// files exist but does not read them.
pub fn load(path: &Path, sets: &[String]) -> Result<Plan> {
    let text = crate::io::read_text_file(path, "pipeline file", crate::io::MAX_SPEC_BYTES)?;
    let bytes = text.as_bytes();
    let mut positions = Positions::scan(path, &text);
    let mut value: serde_yaml_ng::Value =
        serde_yaml_ng::from_str(&text).map_err(|e| yaml::translate(&e, &positions))?;
    if value.is_null() {
        value = serde_yaml_ng::Value::Mapping(Default::default());
    }
    for s in sets {
        let key = yaml::apply_set(&mut value, s)?;
        positions.record_set(&key, s);
    }
    yaml::check_embedded::<SpectrumSettings>(&value, "spectrum", &["enabled"], &positions)?;
    yaml::check_embedded::<RatioSettings>(&value, "excited_states", &["methods"], &positions)?;
    yaml::check_embedded::<DecompositionSettings>(
        &value,
        "decomposition",
        &["enabled", "energies", "dispersion", "twist"],
        &positions,
    )?;
    let spec: PipelineSpec = if sets.is_empty() {
        serde_yaml_ng::from_str(&text).map_err(|e| yaml::translate(&e, &positions))?
    } else {
        let merged = serde_yaml_ng::to_string(&value)
            .map_err(|e| Error::config(format!("cannot apply --set overrides: {e}")))?;
        serde_yaml_ng::from_str(&merged).map_err(|e| yaml::translate(&e, &positions))?
    };
    // Sections that embed a stage's settings (flattened) cannot refuse unknown keys while
    // parsing; every key that does not survive the round trip through the typed spec is one.
    let resolved = serde_yaml_ng::to_value(&spec)
        .map_err(|e| Error::config(format!("cannot represent the resolved settings: {e}")))?;
    yaml::check_known_keys(&value, &resolved, "", &positions)?;
    let mut spec = spec;
    let fits = &mut spec.spectrum.fits;
    fits.l_extent.get_or_insert(spec.ensemble.l as usize);
    fits.t_extent.get_or_insert(spec.ensemble.t as usize);
    if fits.twist.is_none() && spec.decomposition.twist != [0.0; 3] {
        fits.twist = Some(spec.decomposition.twist);
    }
    let base = path.parent().unwrap_or(Path::new("")).to_path_buf();
    let resolve = |p: &Path| -> PathBuf {
        if p.is_absolute() {
            p.to_path_buf()
        } else {
            base.join(p)
        }
    };
    let plan = Plan {
        source: path.to_path_buf(),
        source_sha256: sha256_hex(bytes),
        twopt: resolve(&spec.data.twopt),
        threept: resolve(&spec.data.threept),
        out_dir: resolve(&spec.output.dir),
        last_stage: last_stage(&spec),
        overrides: sets.to_vec(),
        spec,
        positions,
        force: false,
        jobs: None,
    };
    validate(&plan)?;
    Ok(plan)
}

/// Hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

fn last_stage(spec: &PipelineSpec) -> Stage {
    let mut last = spec.stop_after.unwrap_or(Stage::Q2Fits);
    let enabled = [
        (Stage::Spectrum, spec.spectrum.enabled),
        (Stage::Ratio, spec.ratio.enabled),
        (Stage::Decomposition, spec.decomposition.enabled),
        (Stage::Q2Fits, spec.q2_fits.enabled),
    ];
    // each stage consumes the previous one's results: switching one off ends the run
    for (pair, (stage, on)) in Stage::ALL.windows(2).zip(enabled) {
        if !on && stage <= last {
            last = pair[0];
            break;
        }
    }
    last
}

/// Form factors that the decomposition can produce for a hadron.
pub fn form_factors_of(hadron: Hadron) -> Vec<FormFactor> {
    let mut out = Vec::new();
    for kind in [
        CurrentKind::Vector,
        CurrentKind::Axial,
        CurrentKind::Scalar,
        CurrentKind::Pseudoscalar,
        CurrentKind::Tensor,
    ] {
        out.extend_from_slice(FormFactor::of(hadron, kind));
    }
    out
}

fn validate(plan: &Plan) -> Result<()> {
    let s = &plan.spec;
    let err = |path: &str, msg: String| Err(plan.error(path, msg));
    let e = &s.ensemble;
    if e.l == 0 {
        return err("ensemble.L", "L must be a positive number of sites".into());
    }
    if e.t < 4 {
        return err(
            "ensemble.T",
            format!("T = {} is too small; expected at least 4 time slices", e.t),
        );
    }
    for (key, v, what) in [
        (
            "ensemble.spacing_fm",
            e.spacing_fm,
            "the lattice spacing in fm",
        ),
        (
            "ensemble.pion_mass",
            e.pion_mass,
            "the pion mass in lattice units",
        ),
    ] {
        if !(v.is_finite() && v > 0.0) {
            return err(
                key,
                format!("{v} is not valid: expected a positive number ({what})"),
            );
        }
    }
    for (key, p) in [("data.twopt", &plan.twopt), ("data.threept", &plan.threept)] {
        if let Some(why) = crate::io::not_a_regular_file(p) {
            return err(
                key,
                format!(
                    "the file `{}` {why} (paths are relative to the pipeline file)",
                    p.display()
                ),
            );
        }
    }
    let r = &s.resampling;
    if r.bin_size == 0 {
        return err(
            "resampling.bin_size",
            "bin_size 0 is not valid: expected 1 or more configurations per bin".into(),
        );
    }
    if r.method == ResamplingMethod::Bootstrap && r.samples < 2 {
        return err(
            "resampling.samples",
            format!(
                "{} bootstrap samples are too few: expected at least 2 (typically 200 or more)",
                r.samples
            ),
        );
    }
    let sp = &s.spectrum.fits;
    if sp.t_min.from > sp.t_min.to {
        return err(
            "spectrum.t_min",
            format!(
                "t_min from {} is after to {}: expected from <= to",
                sp.t_min.from, sp.t_min.to
            ),
        );
    }
    if let Some(t_max) = sp.t_max {
        if sp.t_min.to >= t_max {
            return err(
                "spectrum.t_max",
                format!(
                    "t_max = {t_max} must be above the largest t_min ({})",
                    sp.t_min.to
                ),
            );
        }
        if t_max >= e.t as usize {
            return err(
                "spectrum.t_max",
                format!("t_max = {t_max} must be below T = {}", e.t),
            );
        }
    }
    if sp.n_states.from < 1 || sp.n_states.to > 3 || sp.n_states.from > sp.n_states.to {
        return err(
            "spectrum.n_states",
            format!(
                "n_states {}..={} is not valid: expected a range within 1..=3",
                sp.n_states.from, sp.n_states.to
            ),
        );
    }
    if s.excited_states.methods.contains(&Estimator::TwoState) && sp.n_states.to < 2 {
        return err("spectrum.n_states", "the two-state ratio fit needs the excited-state gap: let n_states reach 2, or drop two_state from excited_states.methods".into());
    }
    if let Some(tseps) = &s.ratio.tsep {
        if tseps.is_empty() {
            return err(
                "ratio.tsep",
                "the list of tsep values is empty; leave the key out to use every tsep in the data"
                    .into(),
            );
        }
        for (i, &t) in tseps.iter().enumerate() {
            if 2 * s.excited_states.fits.tau_cut >= t {
                return err(&format!("ratio.tsep[{i}]"), format!("tsep = {t} leaves no insertion point with tau_cut = {}: expected tau_cut < tsep/2", s.excited_states.fits.tau_cut));
            }
        }
    }
    if let Some(cs) = &s.ratio.currents {
        for (i, c) in cs.iter().enumerate() {
            check_current(plan, &format!("ratio.currents[{i}]"), c)?;
        }
    }
    let x = &s.excited_states;
    if x.methods.is_empty() {
        return err(
            "excited_states.methods",
            format!(
                "no excited-state method chosen: expected some of {}",
                Estimator::VALID
            ),
        );
    }
    let final_method = x.fits.final_method;
    if !x
        .methods
        .iter()
        .any(|m| m.selects(final_method) || final_method.selects(*m))
    {
        let run: Vec<String> = x.methods.iter().map(Estimator::to_string).collect();
        return err(
            "excited_states.final_method",
            format!(
                "the final method `{final_method}` is not among the methods run ({})",
                run.join(", ")
            ),
        );
    }
    let z = &s.renormalization;
    for (name, f) in [
        ("vector", z.vector),
        ("axial", z.axial),
        ("scalar", z.scalar),
        ("pseudoscalar", z.pseudoscalar),
        ("tensor", z.tensor),
    ] {
        if let Some(f) = f {
            if !(f.value.is_finite() && f.value > 0.0) {
                return err(
                    &format!("renormalization.{name}.value"),
                    format!("Z = {} is not valid: expected a positive number", f.value),
                );
            }
            if !(f.error.is_finite() && f.error >= 0.0) {
                return err(
                    &format!("renormalization.{name}.error"),
                    format!(
                        "dZ = {} is not valid: expected zero or a positive number",
                        f.error
                    ),
                );
            }
        }
    }
    let d = &s.decomposition;
    for (i, t) in d.twist.iter().enumerate() {
        if !t.is_finite() {
            return err(
                &format!("decomposition.twist[{i}]"),
                "twist angles must be finite numbers (radians)".into(),
            );
        }
    }
    for name in d.solve.phases.keys() {
        check_current(plan, &format!("decomposition.phases.{name}"), name)?;
    }
    if !(d.solve.q2_tolerance.is_finite() && d.solve.q2_tolerance >= 0.0) {
        return err(
            "decomposition.q2_tolerance",
            format!(
                "q2_tolerance = {} is not valid: expected zero or a positive number",
                d.solve.q2_tolerance
            ),
        );
    }
    if let Some(f) = &s.ratio.flavor {
        if f.terms.is_empty() {
            return err(
                "ratio.flavor.terms",
                format!("the flavour combination `{}` has no terms", f.label),
            );
        }
    }
    let valid = form_factors_of(e.hadron);
    let valid_names: Vec<&str> = valid.iter().map(|f| f.name()).collect();
    for (ff, q) in &s.q2_fits.form_factors {
        let name = ff.name();
        let key = format!("q2_fits.form_factors.{name}");
        if !valid.contains(ff) {
            let spin = match e.hadron {
                Hadron::Spin0 => "spin-0",
                Hadron::Spin1Half => "spin-1/2",
            };
            let mut m = format!("`{name}` is not a form factor of a {spin} hadron");
            m.push_str(&format!(" Valid: {}.", valid_names.join(", ")));
            return err(&key, m);
        }
        if q.is_empty() {
            return err(
                &key,
                "no Q² fit listed: expected e.g. `[{model: dipole}]`".into(),
            );
        }
    }
    if s.output.dir.as_os_str().is_empty() {
        return err(
            "output.dir",
            "the run directory is empty: expected a path".into(),
        );
    }
    Ok(())
}

fn check_current(plan: &Plan, path: &str, name: &str) -> Result<()> {
    if Current::parse(name).is_some() {
        return Ok(());
    }
    let names: Vec<&str> = Current::ALL.iter().map(|c| c.name()).collect();
    let mut m = format!("`{name}` is not a current");
    if let Some(s) = yaml::suggest(name, &names) {
        m.push_str(&format!("; did you mean `{s}`?"));
    }
    m.push_str(&format!(" Valid: {}.", names.join(", ")));
    Err(plan.error(path, m))
}

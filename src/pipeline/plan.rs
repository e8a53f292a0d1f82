//! The second settings step: a validated [`Plan`] built from the parsed spec before any
//! computation. Every path is resolved against the pipeline file, every range checked, every
//! name looked up; an error quotes the YAML line and column of the offending key (or the
//! `--set` argument that set it) and says what would be valid.

use super::spec::{PipelineSpec, Stage};
use super::yaml::{self, Positions};
use crate::data::CurrentKind;
use crate::kinematics::{FormFactor, Hadron};
use crate::ratio::Estimator;
use crate::{Error, Invalid, Result};
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
    /// Two-point table, resolved (empty with an HDF5 source).
    pub twopt: PathBuf,
    /// Three-point table, resolved (empty with an HDF5 source).
    pub threept: PathBuf,
    /// The HDF5 source, resolved, if the data come from HDF5.
    pub hdf5: Option<crate::io::hdf5::Mapping>,
    /// Run directory, resolved (`--out` replaces it via [`Plan::with_out_dir`]).
    pub out_dir: PathBuf,
    /// The last stage that runs (`stop_after`, else the Q² fits).
    pub last_stage: Stage,
    /// Key positions, for errors found later against the data.
    pub positions: Positions,
    /// Replace an existing run directory.
    pub force: bool,
    /// Worker threads (`None`: rayon's default).
    pub jobs: Option<usize>,
}

impl Plan {
    /// The data files to record in the manifest: both tables, or the packed or single HDF5
    /// file (per-configuration files are too many to hash; their template is in the settings).
    pub fn input_files(&self) -> Vec<PathBuf> {
        use crate::io::hdf5::Layout;
        match self.hdf5.as_ref().map(|m| &m.layout) {
            None => vec![self.twopt.clone(), self.threept.clone()],
            Some(Layout::Packed(p) | Layout::OneFile { file: p, .. }) => vec![p.clone()],
            Some(Layout::PerConfig { .. }) => Vec::new(),
        }
    }

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
/// files exist but does not read them. The file is deserialized into the typed spec once;
/// every section refuses unknown keys itself, and errors carry the key's line and column.
pub fn load(path: &Path, sets: &[String]) -> Result<Plan> {
    let text = crate::io::read_text_file(path, "pipeline file", crate::io::MAX_SPEC_BYTES)?;
    let bytes = text.as_bytes();
    yaml::check_flow_depth(&path.display().to_string(), &text)?;
    let mut positions = Positions::scan(path, &text);
    let mut spec = if sets.is_empty() {
        parse(&text, &positions)?
    } else {
        let mut value: serde_yaml_ng::Value =
            serde_yaml_ng::from_str(&text).map_err(|e| yaml::translate(&e, &positions))?;
        if value.is_null() {
            value = serde_yaml_ng::Value::Mapping(Default::default());
        }
        for s in sets {
            let key = yaml::apply_set(&mut value, s)?;
            positions.record_set(&key, s);
        }
        let merged = serde_yaml_ng::to_string(&value)
            .map_err(|e| Error::config(format!("cannot apply --set overrides: {e}")))?;
        // positions in `merged` are not the file's: errors are placed by key path
        parse(&merged, &positions.by_key_only())?
    };
    // the spectrum fits take the lattice from the ensemble, the one place it is set
    let e = &spec.ensemble;
    let fits = &mut spec.spectrum;
    fits.l_extent = Some(e.l as usize);
    fits.t_extent = e.t.map(|t| t as usize);
    // momenta no three-point channel uses carry the sink twist; the others get theirs from
    // the channels when the spectrum stage starts (stages/spectrum_inputs.rs)
    let sink = e.sink_twist();
    fits.twist = (sink != [0.0; 3]).then_some(sink);
    fits.mass_dispersion = match spec.decomposition.energies {
        crate::kinematics::EnergySource::Lattice => crate::kinematics::Dispersion::Lattice,
        _ => crate::kinematics::Dispersion::Continuum,
    };
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
        twopt: spec.data.twopt.as_deref().map(resolve).unwrap_or_default(),
        threept: spec
            .data
            .threept
            .as_deref()
            .map(resolve)
            .unwrap_or_default(),
        hdf5: match &spec.data.hdf5 {
            Some(h) => Some(
                h.resolve(&base, "data.hdf5")
                    .map_err(|e| positions.error("data.hdf5", e))?,
            ),
            None => None,
        },
        out_dir: resolve(&spec.output.dir),
        last_stage: spec.stop_after.unwrap_or(Stage::Q2Fits),
        overrides: sets.to_vec(),
        spec,
        positions,
        force: false,
        jobs: None,
    };
    validate(&plan)?;
    Ok(plan)
}

fn parse(text: &str, positions: &Positions) -> Result<PipelineSpec> {
    if text.trim().is_empty() {
        return serde_yaml_ng::from_str("{}").map_err(|e| yaml::translate(&e, positions));
    }
    serde_yaml_ng::from_str(text).map_err(|e| yaml::translate(&e, positions))
}

/// Hex SHA-256 of `bytes`.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
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

/// Every section checks its own ranges ([`Invalid`] with the key path inside the section);
/// the rules that tie sections together are checked here.
fn validate(plan: &Plan) -> Result<()> {
    let s = &plan.spec;
    let within = |section: &str, r: std::result::Result<(), Invalid>| {
        r.map_err(|e| plan.error(&format!("{section}.{}", e.key), e.message))
    };
    within("ensemble", s.ensemble.validate())?;
    within("resampling", s.resampling.validate())?;
    within("spectrum", s.spectrum.validate())?;
    within("ratio", s.ratio.validate())?;
    within("excited_states", s.excited_states.validate())?;
    within("renormalization", s.renormalization.validate())?;
    within("decomposition", s.decomposition.validate())?;
    within("output", s.output.validate())?;
    let err = |path: &str, msg: String| Err(plan.error(path, msg));
    let csv = [&s.data.twopt, &s.data.threept].map(Option::is_some);
    if plan.hdf5.is_some() == (csv[0] || csv[1]) || (plan.hdf5.is_none() && csv != [true; 2]) {
        return err(
            "data",
            "expected either both CSV tables (`twopt` and `threept`) or an `hdf5` source".into(),
        );
    }
    if let Some(
        crate::io::hdf5::Layout::Packed(p) | crate::io::hdf5::Layout::OneFile { file: p, .. },
    ) = plan.hdf5.as_ref().map(|m| &m.layout)
    {
        if let Some(why) = crate::io::not_a_regular_file(p) {
            return err(
                "data.hdf5",
                format!(
                    "the file `{}` {why} (paths are relative to the pipeline file)",
                    p.display()
                ),
            );
        }
    }
    for (key, p) in [("data.twopt", &plan.twopt), ("data.threept", &plan.threept)] {
        let Some(why) = crate::io::not_a_regular_file(p).filter(|_| plan.hdf5.is_none()) else {
            continue;
        };
        return err(
            key,
            format!(
                "the file `{}` {why} (paths are relative to the pipeline file)",
                p.display()
            ),
        );
    }
    if let (Some(t_max), Some(t)) = (s.spectrum.t_max, s.ensemble.t) {
        if t_max >= t as usize {
            return err(
                "spectrum.t_max",
                format!("t_max = {t_max} must be below T = {t}"),
            );
        }
    }
    if s.final_value.pin == Some(Estimator::TwoStateLate) && !s.excited_states.two_state_late {
        return err(
            "final_value.pin",
            "`two_state_late` is made only with `excited_states.two_state_late: true` (the \
             default, turned off here)"
                .into(),
        );
    }
    if s.excited_states.methods.contains(&Estimator::TwoState) && s.spectrum.n_states.to < 2 {
        return err("spectrum.n_states", "the two-state ratio fit needs the excited-state gap: let n_states reach 2, or drop two_state from excited_states.methods".into());
    }
    for (i, &t) in s.ratio.tsep.iter().flatten().enumerate() {
        if let Some(m) = s.excited_states.tsep_problem(t) {
            return err(&format!("ratio.tsep[{i}]"), m);
        }
    }
    check_form_factors(plan)
}

/// Every Q² fit names a form factor of the hadron and lists at least one shape.
fn check_form_factors(plan: &Plan) -> Result<()> {
    let hadron = plan.spec.ensemble.hadron;
    let valid = form_factors_of(hadron);
    let valid_names: Vec<&str> = valid.iter().map(|f| f.name()).collect();
    for (ff, q) in &plan.spec.q2_fits.form_factors {
        let key = format!("q2_fits.form_factors.{}", ff.name());
        if !valid.contains(ff) {
            let spin = match hadron {
                Hadron::Spin0 => "spin-0",
                Hadron::Spin1Half => "spin-1/2",
            };
            return Err(plan.error(
                &key,
                format!(
                    "`{}` is not a form factor of a {spin} hadron. Valid: {}.",
                    ff.name(),
                    valid_names.join(", ")
                ),
            ));
        }
        if q.is_empty() {
            return Err(plan.error(&key, "no Q² fit listed: expected e.g. `[{model: dipole}]`"));
        }
    }
    Ok(())
}

//! The mock-ensemble generator (docs/methods.md §8): per-configuration two- and three-point
//! functions made from a known truth, for closure tests and the demo.
//!
//! A YAML spec ([`MockSpec`]) fixes the lattice, the hadron's spectrum (one to three states,
//! energies from a dispersion relation, overlaps with a smearing-like momentum fall-off), the
//! form-factor models, the excited-state transition strengths, the channels and the noise
//! (Gaussian, correlated across time, growing like the nucleon signal-to-noise problem,
//! correlated between a three-point function and the two-point function dividing it, AR(1) in
//! Monte Carlo time). [`generate`] builds the ensemble in memory; [`generate_from_file`]
//! writes `twopt.csv`, `threept.csv` (docs/data-format.md) and `truth.yaml` ([`Truth`]).
//!
//! The three-point means use the kinematic factors of [`crate::kinematics`], so the ratio of
//! docs/methods.md §3 tends to `Pi = sum_k K_k G_k(Q^2)`, exactly so for a single-state spec. Every
//! channel draws its noise from its own seeded ChaCha8 stream: the same seed gives
//! byte-identical files on any number of threads.

mod channels;
mod generate;
mod matrix;
mod model;
mod noise;
mod operators;
mod series;
mod spec;
mod truth;

pub use generate::{generate, MockEnsemble};
pub use spec::{
    BasisSpec, ChannelSpec, Correlation, EnsembleSpec, FormFactorModel, FormFactorSpec, HadronSpec,
    Insertion, MockSpec, MomentumPair, MomentumSelection, NoiseSpec, NonNegative, OperatorSpec,
    OutputSpec, Positive, StateSpec, TransitionSpec, Transitions,
};
pub use truth::{
    Truth, TruthConfigs, TruthHadron, TruthLattice, TruthLevels, TruthMatrixElement, TruthPoint,
};

use crate::report::{Marker, OutputRules, RunDir};
use crate::{Error, Result};
use std::io::Write;
use std::path::Path;

/// Names of the files written by [`generate_from_file`].
pub const OUTPUT_FILES: [&str; 3] = ["twopt.csv", "threept.csv", "truth.yaml"];

/// Read a mock spec and write `twopt.csv`, `threept.csv` and `truth.yaml` into the directory
/// `out`; returns a one-paragraph summary for the terminal. The files are written into a
/// temporary sibling directory that is moved into place only when all three are complete
/// ([`crate::report::RunDir`] with the mock marker), so a failed run leaves no mixed ensemble.
/// An existing `out` is replaced only with `force` and only if it is an earlier mock
/// ensemble (or empty); a directory holding the spec is never replaced.
pub fn generate_from_file(spec_path: &Path, out: &Path, force: bool) -> Result<String> {
    let text = crate::io::read_text_file(spec_path, "mock spec", crate::io::MAX_SPEC_BYTES)?;
    let spec = MockSpec::from_yaml(&text, &spec_path.display().to_string())?;
    let rules = OutputRules {
        force,
        inputs: vec![spec_path.to_path_buf()],
        marker: Marker::Mock,
    };
    let dir = RunDir::create_with(out, &rules)?;
    let ensemble = generate(&spec)?;
    let target = |name: &str| dir.path().join(name);
    write_file(&target(OUTPUT_FILES[0]), |w| {
        crate::io::write_twopt(&ensemble.twopt, w)
    })?;
    write_file(&target(OUTPUT_FILES[1]), |w| {
        crate::io::write_threept(&ensemble.threept, w)
    })?;
    let truth = ensemble.truth.to_yaml()?;
    let truth_path = target(OUTPUT_FILES[2]);
    write_file(&truth_path, |w| {
        w.write_all(truth.as_bytes())
            .map_err(|e| Error::io(&truth_path, e))
    })?;
    let notes: Vec<String> = dir.notes().to_vec();
    dir.commit()?;
    let mut text = summary(&spec, &ensemble, out);
    for n in notes {
        text.push_str(&format!("\n  note: {n}"));
    }
    Ok(text)
}

/// Write `path` through a buffered writer, flushing at the end.
fn write_file(
    path: &Path,
    write: impl FnOnce(&mut std::io::BufWriter<std::fs::File>) -> Result<()>,
) -> Result<()> {
    let file = std::fs::File::create(path).map_err(|e| Error::io(path, e))?;
    let mut w = std::io::BufWriter::new(file);
    write(&mut w)?;
    w.flush().map_err(|e| Error::io(path, e))?;
    w.get_ref().sync_all().map_err(|e| Error::io(path, e))?;
    Ok(())
}

fn summary(spec: &MockSpec, e: &MockEnsemble, out: &Path) -> String {
    let n_cfg = spec.ensemble.configs;
    let rows2: usize = e.twopt.channels.values().map(|s| s.n_t * n_cfg).sum();
    let rows3: usize = e.threept.channels.values().map(|s| s.n_t * n_cfg).sum();
    let spin = match spec.hadron.kind {
        crate::kinematics::Hadron::Spin1Half => "spin 1/2",
        crate::kinematics::Hadron::Spin0 => "spin 0",
    };
    format!(
        "mock ensemble ({spin}, {} state(s), {n_cfg} configurations, seed {}) written to {}:\n  \
         twopt.csv    {} momenta, {rows2} rows\n  \
         threept.csv  {} channels, {rows3} rows\n  \
         truth.yaml   {} (p_f, q) points, {} matrix elements",
        spec.hadron.states.len(),
        spec.seed,
        out.display(),
        e.twopt.channels.len(),
        e.threept.channels.len(),
        e.truth.points.len(),
        e.truth.matrix_elements.len(),
    )
}

/// The JSON Schema of the mock specification, pretty-printed with a trailing newline (the
/// text of `schemas/mock.schema.json`).
pub fn schema_json() -> String {
    let mut text = serde_json::to_string_pretty(&schema_value()).unwrap_or_default();
    text.push('\n');
    text
}

/// The JSON Schema of the mock specification as a JSON value.
pub fn schema_value() -> serde_json::Value {
    serde_json::to_value(schemars::schema_for!(MockSpec)).unwrap_or_default()
}

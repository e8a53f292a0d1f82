//! The mock-ensemble generator (methods.md §8). The spec, noise, channel selection and truth
//! types are in place; generation waits for the kinematic factors.

pub mod channels;
pub mod noise;
pub mod spec;
pub mod truth;

use std::path::Path;

/// Read a mock spec and write `twopt.csv`, `threept.csv` and `truth.yaml` into `out`;
/// returns a one-paragraph summary for the terminal.
pub fn generate_from_file(_spec: &Path, _out: &Path) -> crate::Result<String> {
    Err(crate::Error::config("mock generation is not built yet"))
}

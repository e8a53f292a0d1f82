//! The mock-ensemble generator (methods.md §8). Placeholder; filled by the mock work.

use std::path::Path;

/// Read a mock spec and write `twopt.csv`, `threept.csv` and `truth.yaml` into `out`;
/// returns a one-paragraph summary for the terminal.
pub fn generate_from_file(_spec: &Path, _out: &Path) -> crate::Result<String> {
    Err(crate::Error::config("mock generation is not built yet"))
}

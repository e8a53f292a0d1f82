//! The declarative YAML pipeline: its types, its validation, and the runner that chains the
//! stages.
//!
//! A pipeline file is read in two steps: [`spec`] parses it into plain serde types (unknown
//! keys refused, errors with line and column), then [`plan::load`] builds a validated
//! [`Plan`] (paths resolved, ranges and names checked, near misses suggested) before any
//! computation. The JSON Schema of the file ([`schema_json`]) is generated from the same
//! types, so editors can complete and check pipeline files.

pub mod plan;
pub mod spec;
pub mod yaml;

pub use plan::{load, Plan};
pub use spec::PipelineSpec;

/// The JSON Schema of the pipeline file, pretty-printed with a trailing newline (the text
/// of `schemas/pipeline.schema.json`).
pub fn schema_json() -> String {
    let schema = schemars::schema_for!(PipelineSpec);
    let mut text = serde_json::to_string_pretty(&schema).unwrap_or_default();
    text.push('\n');
    text
}

/// `formfactory check`: parse and validate the pipeline with its overrides, computing
/// nothing; returns a short summary for the terminal.
pub fn check(path: &std::path::Path, sets: &[String]) -> crate::Result<String> {
    let plan = load(path, sets)?;
    Ok(format!(
        "{}: valid; stages up to `{}`; data {} and {}\n",
        path.display(),
        plan.last_stage.name(),
        plan.twopt.display(),
        plan.threept.display()
    ))
}

//! `manifest.json` of a run: tool version, input digests, the resolved settings, the seed,
//! the real start of the run, the time of every stage and every warning.

use crate::pipeline::plan::Plan;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::ResamplingMethod;
use crate::report::Manifest;
use crate::Result;

/// The manifest of a run; `finished` is stamped when it is written.
pub fn manifest(plan: &Plan, results: &RunResults) -> Result<Manifest> {
    let settings = serde_json::json!({
        "pipeline": serde_json::to_value(&plan.spec).unwrap_or(serde_json::Value::Null),
        "overrides": plan.overrides,
        "last_stage": plan.last_stage.name(),
        "jobs": plan.jobs,
    });
    let seed = match plan.spec.resampling.method {
        ResamplingMethod::Bootstrap => Some(plan.spec.resampling.seed),
        ResamplingMethod::Jackknife => None,
    };
    let mut m = Manifest::start(settings, seed);
    m.started = results.started;
    m.add_input(&plan.source)?;
    for p in plan.input_files() {
        m.add_input(&p)?;
    }
    for (stage, t) in &results.timings {
        m.add_stage(stage.as_str(), *t);
    }
    m.warnings = results.warnings.clone();
    Ok(m)
}

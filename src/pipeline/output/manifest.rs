//! `manifest.json` of a run: tool version, input digests, the resolved settings, the seed,
//! the real start of the run, the time of every stage, every warning, and what was read
//! (configurations, bins, and every configuration dropped, with the reason).

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
    // Tables hashed while they were read are not read a second time.
    let read: &[crate::io::FileDigest] = results.data.as_ref().map_or(&[], |d| &d.input_digests);
    for p in plan.input_files() {
        match read.iter().find(|d| d.path == p) {
            Some(d) => m.inputs.push(crate::report::manifest::InputFile {
                path: d.path.clone(),
                bytes: d.bytes,
                sha256: d.sha256.clone(),
            }),
            None => m.add_input(&p)?,
        }
    }
    for (stage, t) in &results.timings {
        m.add_stage(stage.as_str(), *t);
    }
    m.warnings = results.warnings.clone();
    if let Some(d) = &results.data {
        m.data = serde_json::json!({
            "configurations": d.n_configs,
            "bins": d.n_bins,
            "resamples": d.n_samples,
            "time_extent": d.t_extent,
            "twopt_channels": d.n_twopt_channels,
            "threept_channels": d.n_threept_channels,
            "dropped_configurations": {
                "not_in_both_tables": d.dropped_not_in_both,
                "incomplete_last_bin": d.dropped_by_binning,
            },
            "notes": d.notes,
        });
    }
    Ok(m)
}

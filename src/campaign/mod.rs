//! Campaigns: one analysis over many ensembles and analysis variants, run locally or as a
//! Slurm job array, and combined into results at the physical point.
//!
//! A campaign file ([`spec`]) names a base pipeline, the ensembles and the variant axes;
//! [`load`](mod@load) validates it with file:line:column positions; [`expand`] turns it into tasks
//! (ensemble × variant), each an ordinary run directory made by the pipeline's run function
//! ([`local`] runs them, [`slurm`] writes and submits the job array). [`combine`] gathers the
//! runs' written tables ([`gather`]), fits each quantity against a² and m_π² ([`fit`]) and
//! [`output`] writes the result like a run: tables, plots, report and manifest.

pub mod combine;
pub mod command;
pub mod expand;
pub mod fit;
pub mod gather;
pub mod load;
pub mod local;
pub mod output;
pub mod slurm;
pub mod spec;

pub use load::{load, Campaign};
pub use spec::CampaignSpec;

use crate::Result;

/// The JSON Schema of the campaign file, pretty-printed with a trailing newline (the text of
/// `schemas/campaign.schema.json`).
pub fn schema_json() -> String {
    let schema = schemars::schema_for!(CampaignSpec);
    let mut text = serde_json::to_string_pretty(&schema).unwrap_or_default();
    text.push('\n');
    text
}

/// `campaign check`: validate the campaign file and every task's pipeline settings (the base
/// pipeline with the task's overrides), reading no data; returns a short summary.
pub fn check(c: &Campaign) -> Result<String> {
    let tasks = expand::tasks(c);
    for t in &tasks {
        let key = format!("ensembles[{}]", t.ensemble);
        crate::pipeline::load(&c.pipeline, &t.sets)
            .map_err(|e| c.error(&key, format!("run {}: {e}", t.label())))?;
    }
    Ok(format!(
        "{}: valid; {} ensembles x {} variants = {} runs; {} quantities to combine\n",
        c.source.display(),
        c.spec.ensembles.len(),
        expand::variants(c).len(),
        tasks.len(),
        c.spec.combine.quantities.len()
    ))
}

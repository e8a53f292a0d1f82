//! Expansion of a campaign into tasks: every ensemble times every variant (the product of
//! the variant axes), each an ordinary pipeline run with its own overrides and run directory.
//! Tasks are numbered in a fixed order (ensembles outer, variants inner, axes in file order)
//! so that a Slurm array index names the same task on every machine.

use super::load::Campaign;
use std::path::PathBuf;

/// One run of the campaign.
#[derive(Clone, Debug, PartialEq)]
pub struct Task {
    /// Position in the expansion (the Slurm array index).
    pub index: usize,
    /// Index of the ensemble in the campaign file.
    pub ensemble: usize,
    /// Ensemble name.
    pub ensemble_name: String,
    /// Variant name: option labels joined by `+` (`base` without axes).
    pub variant: String,
    /// The overrides of the base pipeline, in the order they are applied.
    pub sets: Vec<String>,
    /// The run directory.
    pub run_dir: PathBuf,
    /// The task record (state, settings hash, error).
    pub record: PathBuf,
}

impl Task {
    /// `ensemble/variant`, for messages.
    pub fn label(&self) -> String {
        format!("{}/{}", self.ensemble_name, self.variant)
    }
}

/// The variants: the product of the axes, each as (name, overrides); the first is the base.
pub fn variants(c: &Campaign) -> Vec<(String, Vec<String>)> {
    let mut out: Vec<(Vec<&str>, Vec<String>)> = vec![(Vec::new(), Vec::new())];
    for axis in &c.spec.variants {
        let mut next = Vec::with_capacity(out.len() * axis.options.len());
        for (labels, sets) in &out {
            for o in &axis.options {
                let mut l = labels.clone();
                l.push(o.label.as_str());
                let mut s = sets.clone();
                s.extend(o.set.iter().cloned());
                next.push((l, s));
            }
        }
        out = next;
    }
    out.into_iter()
        .map(|(labels, sets)| {
            let name = if labels.is_empty() {
                "base".to_string()
            } else {
                labels.join("+")
            };
            (name, sets)
        })
        .collect()
}

/// A path as a single-quoted YAML scalar (so `--set` reads it verbatim).
fn quoted(p: &std::path::Path) -> String {
    format!("'{}'", p.display().to_string().replace('\'', "''"))
}

/// The overrides that put ensemble `i`'s data and parameters into the base pipeline.
fn ensemble_sets(c: &Campaign, i: usize) -> Vec<String> {
    let e = &c.spec.ensembles[i];
    let abs = |p: &std::path::Path| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf());
    vec![
        format!("ensemble.label={}", e.name),
        format!("ensemble.L={}", e.l),
        format!("ensemble.T={}", e.t),
        format!("ensemble.spacing_fm={:?}", e.spacing_fm.value),
        format!("ensemble.pion_mass={:?}", e.pion_mass),
        format!("data.twopt={}", quoted(&abs(&c.data[i].0))),
        format!("data.threept={}", quoted(&abs(&c.data[i].1))),
    ]
}

/// Every task of the campaign, in array order.
pub fn tasks(c: &Campaign) -> Vec<Task> {
    let variants = variants(c);
    let mut out = Vec::new();
    for (i, e) in c.spec.ensembles.iter().enumerate() {
        for (name, vsets) in &variants {
            let mut sets = ensemble_sets(c, i);
            sets.extend(e.set.iter().cloned());
            sets.extend(vsets.iter().cloned());
            out.push(Task {
                index: out.len(),
                ensemble: i,
                ensemble_name: e.name.clone(),
                variant: name.clone(),
                sets,
                run_dir: c.output.join("runs").join(&e.name).join(name),
                record: c
                    .output
                    .join("tasks")
                    .join(format!("{}--{}.json", e.name, name)),
            });
        }
    }
    out
}

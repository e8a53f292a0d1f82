//! The Slurm job array: a batch script with one array task per campaign task (partition,
//! account, time limit, resources and modules from the campaign file; one log file per
//! task), submitted with `sbatch` when asked. Each array task runs
//! `formfactory campaign task FILE --index N`, which writes the same run directory and task
//! record as the local runner, so `campaign status` and `campaign combine` read either.

use super::expand::Task;
use super::load::Campaign;
use crate::{Error, Result};
use std::path::{Path, PathBuf};

/// Slurm's `--array` list for `indices` (sorted, ranges compressed: `0-2,5`).
pub fn array_spec(indices: &[usize]) -> String {
    let mut sorted = indices.to_vec();
    sorted.sort_unstable();
    sorted.dedup();
    let mut parts = Vec::new();
    let mut i = 0;
    while i < sorted.len() {
        let mut j = i;
        while j + 1 < sorted.len() && sorted[j + 1] == sorted[j] + 1 {
            j += 1;
        }
        parts.push(if i == j {
            sorted[i].to_string()
        } else {
            format!("{}-{}", sorted[i], sorted[j])
        });
        i = j + 1;
    }
    parts.join(",")
}

/// A string as one single-quoted shell word.
fn shell_word(s: &str) -> String {
    format!("'{}'", s.replace('\'', r"'\''"))
}

fn absolute(p: &Path) -> PathBuf {
    std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf())
}

/// The folder of scripts and logs.
pub fn slurm_dir(c: &Campaign) -> PathBuf {
    c.output.join("slurm")
}

/// The job-array script for `tasks` (by their array index).
pub fn script(c: &Campaign, tasks: &[&Task], executable: &Path) -> String {
    let s = &c.spec.slurm;
    let logs = absolute(&slurm_dir(c).join("logs"));
    let indices: Vec<usize> = tasks.iter().map(|t| t.index).collect();
    let mut out = String::from("#!/bin/bash\n");
    out.push_str(&format!(
        "# Job array of the formfactory campaign `{}`: one array task per (ensemble, variant).\n",
        c.spec.name
    ));
    out.push_str("# Array index -> task:\n");
    for t in tasks {
        out.push_str(&format!("#   {:>4}  {}\n", t.index, t.label()));
    }
    let mut opt = |line: String| out.push_str(&format!("#SBATCH {line}\n"));
    opt(format!("--job-name=ff-{}", c.spec.name));
    opt(format!("--array={}", array_spec(&indices)));
    opt("--ntasks=1".into());
    opt(format!("--output={}/%A_%a.log", logs.display()));
    if let Some(p) = &s.partition {
        opt(format!("--partition={p}"));
    }
    if let Some(a) = &s.account {
        opt(format!("--account={a}"));
    }
    if let Some(t) = &s.time {
        opt(format!("--time={t}"));
    }
    if let Some(n) = s.cpus_per_task {
        opt(format!("--cpus-per-task={n}"));
    }
    if let Some(m) = &s.memory {
        opt(format!("--mem={m}"));
    }
    for e in &s.extra {
        opt(e.clone());
    }
    out.push_str("set -euo pipefail\n");
    for m in &s.modules {
        out.push_str(&format!("module load {}\n", shell_word(m)));
    }
    out.push_str(&format!(
        "exec {} campaign task {} --output {} --index \"$SLURM_ARRAY_TASK_ID\" --threads \"${{SLURM_CPUS_PER_TASK:-1}}\"\n",
        shell_word(&absolute(executable).display().to_string()),
        shell_word(&absolute(&c.source).display().to_string()),
        shell_word(&absolute(&c.output).display().to_string()),
    ));
    out
}

/// Write the script for `tasks` (named after `kind`, e.g. `all` or `failed`) and create the
/// log folder; returns the script's path.
pub fn write_script(
    c: &Campaign,
    tasks: &[&Task],
    kind: &str,
    executable: &Path,
) -> Result<PathBuf> {
    if tasks.is_empty() {
        return Err(Error::config(format!(
            "{}: no {kind} tasks to put in a job array",
            c.source.display()
        )));
    }
    let dir = slurm_dir(c);
    let logs = dir.join("logs");
    std::fs::create_dir_all(&logs).map_err(|e| Error::io(&logs, e))?;
    let path = dir.join(format!("{}-{kind}.sbatch", c.spec.name));
    super::local::write_atomic(&path, script(c, tasks, executable).as_bytes())?;
    Ok(path)
}

/// Submit a script with `sbatch --parsable`; returns the job id.
pub fn submit(script: &Path) -> Result<String> {
    let out = std::process::Command::new("sbatch")
        .arg("--parsable")
        .arg(script)
        .output()
        .map_err(|e| Error::io(Path::new("sbatch"), e))?;
    let stdout = String::from_utf8_lossy(&out.stdout);
    if !out.status.success() {
        return Err(Error::config(format!(
            "sbatch {} failed ({}): {}",
            script.display(),
            out.status,
            String::from_utf8_lossy(&out.stderr).trim()
        )));
    }
    // `--parsable` prints `jobid` or `jobid;cluster`
    let id = stdout
        .trim()
        .split(';')
        .next()
        .unwrap_or("")
        .trim()
        .to_string();
    if id.is_empty() || !id.chars().all(|ch| ch.is_ascii_digit()) {
        return Err(Error::config(format!(
            "sbatch printed `{}`: expected a job id",
            stdout.trim()
        )));
    }
    Ok(id)
}

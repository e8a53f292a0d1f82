//! Running tasks: one task as an ordinary pipeline run (the library's run function with the
//! task's overrides applied like `--set`), the task record it leaves, the status of every
//! task (done, failed, stale, pending) and the local runner that computes several tasks at
//! once with a bound on threads, skipping tasks whose inputs and settings are unchanged.
//!
//! A run directory is written all-or-nothing by the pipeline; beside it the campaign keeps a
//! small JSON record per task (`tasks/<ensemble>--<variant>.json`) with the outcome, the
//! error of a failed run and the hash of the settings the run was made with. A task is
//! stale when that settings hash, or the SHA-256 of any input listed in the run's
//! `manifest.json`, no longer matches.

use super::expand::Task;
use super::load::Campaign;
use crate::{Error, Result};
use serde::{Deserialize, Serialize};
use std::path::Path;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

/// What a task record says.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct TaskRecord {
    /// `ensemble/variant`.
    pub task: String,
    /// `done` or `failed`.
    pub state: String,
    /// SHA-256 of the base pipeline and the task's overrides.
    pub settings_sha256: String,
    /// The error of a failed run (empty when done).
    pub message: String,
    /// UTC time the task ended.
    pub finished: String,
}

/// The state of a task as `campaign status` shows it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub enum State {
    /// Finished, inputs and settings unchanged since.
    Done,
    /// Finished, but an input or a setting changed since: it will be run again.
    Stale,
    /// The last attempt failed.
    Failed,
    /// Never run (or its results are gone).
    Pending,
}

impl State {
    /// The word shown in tables.
    pub fn name(self) -> &'static str {
        match self {
            State::Done => "done",
            State::Stale => "stale",
            State::Failed => "failed",
            State::Pending => "pending",
        }
    }
}

/// A task's state with the reason (the error of a failed run, what changed for a stale one).
#[derive(Clone, Debug)]
pub struct TaskStatus {
    /// The state.
    pub state: State,
    /// Why (empty for done and pending).
    pub detail: String,
}

/// SHA-256 over the base pipeline's bytes and the task's overrides.
pub fn settings_hash(c: &Campaign, task: &Task) -> Result<String> {
    let bytes = std::fs::read(&c.pipeline).map_err(|e| Error::io(&c.pipeline, e))?;
    let mut text = crate::report::manifest::sha256_hex(&bytes);
    for s in &task.sets {
        text.push('\n');
        text.push_str(s);
    }
    Ok(crate::report::manifest::sha256_hex(text.as_bytes()))
}

fn read_record(path: &Path) -> Option<TaskRecord> {
    let text = std::fs::read_to_string(path).ok()?;
    serde_json::from_str(&text).ok()
}

/// Write `bytes` to `path` atomically (temporary sibling, then rename).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let dir = path.parent().unwrap_or(Path::new("."));
    std::fs::create_dir_all(dir).map_err(|e| Error::io(dir, e))?;
    let mut tmp = tempfile::NamedTempFile::new_in(dir).map_err(|e| Error::io(dir, e))?;
    std::io::Write::write_all(&mut tmp, bytes).map_err(|e| Error::io(path, e))?;
    tmp.persist(path).map_err(|e| Error::io(path, e.error))?;
    Ok(())
}

/// Inputs of a run's manifest whose files changed (or vanished) since the run.
fn changed_inputs(run_dir: &Path) -> Option<Vec<String>> {
    let text = std::fs::read_to_string(run_dir.join("manifest.json")).ok()?;
    let manifest: serde_json::Value = serde_json::from_str(&text).ok()?;
    let inputs = manifest.get("inputs")?.as_array()?;
    let mut changed = Vec::new();
    for input in inputs {
        let path = input.get("path").and_then(|p| p.as_str()).unwrap_or("");
        let want = input.get("sha256").and_then(|p| p.as_str()).unwrap_or("");
        match crate::report::manifest::sha256_file(Path::new(path)) {
            Ok((have, _)) if have == want => {}
            _ => changed.push(path.to_string()),
        }
    }
    Some(changed)
}

/// The state of one task, from its record and run directory.
pub fn status(c: &Campaign, task: &Task) -> Result<TaskStatus> {
    let status = |state, detail: String| Ok(TaskStatus { state, detail });
    let Some(record) = read_record(&task.record) else {
        return status(State::Pending, String::new());
    };
    if record.state != "done" {
        return status(State::Failed, record.message);
    }
    let Some(changed) = changed_inputs(&task.run_dir) else {
        return status(
            State::Pending,
            "the run directory or its manifest is missing".into(),
        );
    };
    if record.settings_sha256 != settings_hash(c, task)? {
        return status(State::Stale, "the settings changed".into());
    }
    if !changed.is_empty() {
        return status(State::Stale, format!("changed: {}", changed.join(", ")));
    }
    status(State::Done, String::new())
}

/// Run one task through the pipeline (the run directory replaced if it exists) and write
/// its record; the run's error is returned after the record is written.
pub fn run_task(c: &Campaign, task: &Task, threads: usize) -> Result<()> {
    let settings = settings_hash(c, task)?;
    let outcome = (|| {
        let mut plan =
            crate::pipeline::load(&c.pipeline, &task.sets)?.with_out_dir(task.run_dir.clone());
        plan.force = true;
        plan.jobs = Some(threads.max(1));
        crate::pipeline::run(&plan, &crate::pipeline::Silent).map(|_| ())
    })();
    let record = TaskRecord {
        task: task.label(),
        state: if outcome.is_ok() { "done" } else { "failed" }.into(),
        settings_sha256: settings,
        message: outcome
            .as_ref()
            .err()
            .map(ToString::to_string)
            .unwrap_or_default(),
        finished: crate::report::manifest::rfc3339(std::time::SystemTime::now()),
    };
    let json = serde_json::to_vec_pretty(&record).unwrap_or_default();
    write_atomic(&task.record, &json)?;
    outcome
}

/// What the local runner did.
#[derive(Clone, Debug, Default)]
pub struct RunSummary {
    /// Tasks computed successfully.
    pub ran: Vec<String>,
    /// Tasks skipped as up to date.
    pub skipped: Vec<String>,
    /// Tasks that failed, with their error.
    pub failed: Vec<(String, String)>,
}

/// Run every task that is not done (all with `force`), `parallel` at a time, each on one
/// worker thread. A failing task does not stop the others.
pub fn run_all(c: &Campaign, tasks: &[Task], parallel: usize, force: bool) -> Result<RunSummary> {
    let mut summary = RunSummary::default();
    let mut todo = Vec::new();
    for t in tasks {
        if !force && status(c, t)?.state == State::Done {
            summary.skipped.push(t.label());
        } else {
            todo.push(t);
        }
    }
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<(usize, Result<()>)>> = Mutex::new(Vec::new());
    std::thread::scope(|s| {
        for _ in 0..parallel.clamp(1, todo.len().max(1)) {
            s.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                let Some(task) = todo.get(i) else { break };
                let r = run_task(c, task, 1);
                if let Ok(mut v) = results.lock() {
                    v.push((i, r));
                }
            });
        }
    });
    let mut results = results.into_inner().unwrap_or_default();
    results.sort_by_key(|(i, _)| *i);
    for (i, r) in results {
        match r {
            Ok(()) => summary.ran.push(todo[i].label()),
            Err(e) => summary.failed.push((todo[i].label(), e.to_string())),
        }
    }
    Ok(summary)
}

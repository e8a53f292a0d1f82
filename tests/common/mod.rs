//! Helpers shared by the integration tests: drive the real binary in a temporary directory.
#![allow(dead_code)]

pub mod alloc;
pub mod q2;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Run the `formfactory` binary with `args` in `dir`; returns its output (never panics on a
/// non-zero exit: tests assert on the status themselves).
pub fn formfactory(dir: &Path, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_formfactory"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("the formfactory binary runs")
}

/// Standard error of an output as text.
pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// Standard output of an output as text.
pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// A fresh temporary directory, removed when dropped.
pub fn tempdir() -> tempfile::TempDir {
    tempfile::tempdir().expect("a temporary directory can be made")
}

/// The repository root (for demo-data, pipelines, fixtures).
pub fn repo_root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A file under `tests/fixtures/`.
pub fn fixture(rel: &str) -> PathBuf {
    repo_root().join("tests").join("fixtures").join(rel)
}

/// The names in directory `dir`, sorted.
pub fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .expect("the directory can be listed")
        .map(|e| {
            e.expect("a directory entry")
                .file_name()
                .to_string_lossy()
                .into_owned()
        })
        .collect();
    v.sort();
    v
}

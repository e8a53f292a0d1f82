//! The result directory of a run (or of a mock ensemble), written all-or-nothing, and the
//! rules that keep a user's files safe from it.
//!
//! Files go into a fresh hidden sibling of the final directory (same parent, hence the same
//! filesystem); only a run that finishes moves it into place with `rename(2)`, which is
//! atomic. A failed or interrupted run therefore never leaves a half-written directory under
//! the final name (the write-to-temporary-then-rename pattern, common practice).
//!
//! Safety rules, because replacing a directory deletes what is in it:
//! - Every directory formfactory writes carries a marker file ([`Marker`]) naming its kind.
//!   An existing directory is replaced only when forced, and only if it carries the same
//!   marker or is empty; anything else is refused with the reason.
//! - Even with the marker, the filesystem root, the home directory, the current directory
//!   (or any directory holding one of them) and any directory holding an input of the run
//!   (the pipeline file, a data table, the mock spec) are never replaced.
//! - Leftovers of killed runs (`.NAME.tmp-PID-N`, `.NAME.old-PID-N` whose process is gone and
//!   that carry the marker) are removed at the next start; a previous result hidden by a kill
//!   between the two renames of a swap is put back when the final directory is missing.
//! - SIGINT and SIGTERM remove the temporary directory before the process ends
//!   (`report::signals`).

use super::signals;
use crate::error::{Error, Result};
use std::io::ErrorKind;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};

/// Distinguishes temporary directories made by one process.
static COUNTER: AtomicUsize = AtomicUsize::new(0);

/// What kind of directory formfactory writes; each kind has its own marker file, so a mock
/// ensemble never replaces an analysis run and the other way round.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Marker {
    /// The result directory of `formfactory run`.
    Run,
    /// The data directory written by `formfactory mock`.
    Mock,
}

impl Marker {
    /// The marker's file name inside the directory.
    pub fn file_name(self) -> &'static str {
        match self {
            Marker::Run => ".formfactory-run",
            Marker::Mock => ".formfactory-mock",
        }
    }

    /// The first line of the marker file.
    fn header(self) -> &'static str {
        match self {
            Marker::Run => "formfactory run directory",
            Marker::Mock => "formfactory mock ensemble",
        }
    }

    /// The marker file's text.
    fn contents(self) -> String {
        format!(
            "{}\nwritten by {} {}; `--force` may replace this directory as a whole\n",
            self.header(),
            env!("CARGO_PKG_NAME"),
            env!("CARGO_PKG_VERSION")
        )
    }

    /// Whether `dir` carries this marker (or, for a run directory written before markers
    /// existed, a manifest naming formfactory as the tool).
    pub fn is_on(self, dir: &Path) -> bool {
        let marker = dir.join(self.file_name());
        let regular = marker.symlink_metadata().is_ok_and(|m| m.is_file());
        if regular && read_prefix(&marker).starts_with(self.header()) {
            return true;
        }
        self == Marker::Run && legacy_manifest(&dir.join("manifest.json"))
    }
}

/// The first 4 kB of a file, as text (empty on any error).
fn read_prefix(path: &Path) -> String {
    use std::io::Read;
    let mut buf = Vec::new();
    if let Ok(f) = std::fs::File::open(path) {
        let _ = f.take(4096).read_to_end(&mut buf);
    }
    String::from_utf8_lossy(&buf).into_owned()
}

fn legacy_manifest(path: &Path) -> bool {
    if !path
        .symlink_metadata()
        .is_ok_and(|m| m.is_file() && m.len() < 64 << 20)
    {
        return false;
    }
    let Ok(text) = std::fs::read_to_string(path) else {
        return false;
    };
    serde_json::from_str::<serde_json::Value>(&text)
        .is_ok_and(|v| v.get("tool").and_then(|t| t.as_str()) == Some(env!("CARGO_PKG_NAME")))
}

/// How an output directory may be written: replace a previous one or not, which inputs it
/// must never contain, which marker it carries.
#[derive(Clone, Debug)]
pub struct OutputRules {
    /// Replace an existing directory of the same kind (or an empty one).
    pub force: bool,
    /// Files the run reads; a directory holding one of them is never replaced.
    pub inputs: Vec<PathBuf>,
    /// The kind of directory.
    pub marker: Marker,
}

impl OutputRules {
    /// Rules for a run directory.
    pub fn run(force: bool, inputs: &[&Path]) -> Self {
        OutputRules {
            force,
            inputs: inputs.iter().map(|p| p.to_path_buf()).collect(),
            marker: Marker::Run,
        }
    }
}

/// A result directory being written. Write into [`RunDir::path`], then [`RunDir::commit`].
/// Dropping it uncommitted removes the temporary directory and everything in it.
#[derive(Debug)]
pub struct RunDir {
    tmp: PathBuf,
    final_dir: PathBuf,
    name: String,
    rules: OutputRules,
    committed: bool,
    notes: Vec<String>,
}

impl RunDir {
    /// Start a run directory with no declared inputs (see [`RunDir::create_with`]).
    pub fn create(final_dir: &Path, force: bool) -> Result<RunDir> {
        RunDir::create_with(final_dir, &OutputRules::run(force, &[]))
    }

    /// Start writing a directory that will end up in `final_dir`. Fails at once if
    /// `final_dir` may not be written under `rules` (see the module docs). Missing parent
    /// directories are created; leftovers of killed runs beside `final_dir` are cleaned up.
    pub fn create_with(final_dir: &Path, rules: &OutputRules) -> Result<RunDir> {
        // `.`, `..` or `/` name no new directory: resolved, they are refused below with the
        // reason (the current directory, the filesystem root, ...).
        let target = match final_name(final_dir) {
            Ok(_) => final_dir.to_path_buf(),
            Err(e) => std::fs::canonicalize(final_dir).map_err(|_| e)?,
        };
        if target.parent().is_none() {
            return Err(refuse(final_dir, "is the filesystem root"));
        }
        let name = final_name(&target)?;
        let given = parent_of(&target);
        std::fs::create_dir_all(&given).map_err(|e| Error::io(&given, e))?;
        // The parent is resolved once, so no later path runs through a directory the swap
        // renames (`pipelines/../pipelines`).
        let parent = std::fs::canonicalize(&given).map_err(|e| Error::io(&given, e))?;
        let final_abs = parent.join(&name);
        let mut notes = Vec::new();
        clean_leftovers(&parent, &name, rules.marker, &mut notes)?;
        check_replaceable(final_dir, &final_abs, rules)?;
        signals::install();
        let tmp = loop {
            let candidate = parent.join(format!(
                ".{name}.tmp-{}-{}",
                std::process::id(),
                COUNTER.fetch_add(1, Ordering::Relaxed)
            ));
            match std::fs::create_dir(&candidate) {
                Ok(()) => break candidate,
                Err(e) if e.kind() == ErrorKind::AlreadyExists => continue,
                Err(e) => return Err(Error::io(&candidate, e)),
            }
        };
        signals::register(&tmp);
        let dir = RunDir {
            tmp,
            final_dir: final_dir.to_path_buf(),
            name,
            rules: rules.clone(),
            committed: false,
            notes,
        };
        let marker = dir.tmp.join(rules.marker.file_name());
        std::fs::write(&marker, rules.marker.contents()).map_err(|e| Error::io(&marker, e))?;
        Ok(dir)
    }

    /// The temporary directory to write the results into.
    pub fn path(&self) -> &Path {
        &self.tmp
    }

    /// Where the results will be after [`RunDir::commit`].
    pub fn final_dir(&self) -> &Path {
        &self.final_dir
    }

    /// What the start-up cleaning did (stale temporary directories removed, a hidden previous
    /// result restored), one sentence each.
    pub fn notes(&self) -> &[String] {
        &self.notes
    }

    /// Move the results into place and return the final path. An existing directory is
    /// checked again against the rules; if it may be replaced it is renamed aside, the new
    /// results renamed into place, and only then is the old directory deleted.
    pub fn commit(mut self) -> Result<PathBuf> {
        let parent = parent_of(&self.tmp);
        let final_abs = parent.join(&self.name);
        check_replaceable(&self.final_dir, &final_abs, &self.rules)?;
        // Signals wait while the directories are being swapped.
        let mut guard = signals::hold();
        if final_abs.symlink_metadata().is_err() {
            std::fs::rename(&self.tmp, &final_abs).map_err(|e| Error::io(&self.final_dir, e))?;
            self.committed = true;
            signals::unregister_held(&mut guard, &self.tmp);
            return Ok(self.final_dir.clone());
        }
        let old = parent.join(format!(
            ".{}.old-{}-{}",
            self.name,
            std::process::id(),
            COUNTER.fetch_add(1, Ordering::Relaxed)
        ));
        std::fs::rename(&final_abs, &old).map_err(|e| Error::io(&self.final_dir, e))?;
        if let Err(e) = std::fs::rename(&self.tmp, &final_abs) {
            // Put the previous results back; the new ones are removed on drop.
            return Err(match std::fs::rename(&old, &final_abs) {
                Ok(()) => Error::io(&self.final_dir, e),
                Err(restore) => Error::io(
                    &self.final_dir,
                    std::io::Error::new(
                        e.kind(),
                        format!(
                            "{e}; the previous results were moved to {} and could not be put \
                             back ({restore}): rename that directory to {} by hand",
                            old.display(),
                            final_abs.display()
                        ),
                    ),
                ),
            });
        }
        self.committed = true;
        signals::unregister_held(&mut guard, &self.tmp);
        drop(guard);
        std::fs::remove_dir_all(&old).map_err(|e| {
            Error::io(
                &old,
                std::io::Error::new(
                    e.kind(),
                    format!(
                        "the new results are in place at {}, but the previous ones could not \
                         be removed from here: {e}",
                        self.final_dir.display()
                    ),
                ),
            )
        })?;
        Ok(self.final_dir.clone())
    }
}

impl Drop for RunDir {
    fn drop(&mut self) {
        if !self.committed {
            // Best effort: nothing sensible can be done about a failure during unwinding.
            let _ = std::fs::remove_dir_all(&self.tmp);
            signals::unregister(&self.tmp);
        }
    }
}

/// The last component of `dir`, which must be a plain directory name.
fn final_name(dir: &Path) -> Result<String> {
    match dir.components().next_back() {
        Some(std::path::Component::Normal(name)) => Ok(name.to_string_lossy().into_owned()),
        _ => Err(Error::config(format!(
            "output directory `{}` must end in a directory name (not `/`, `.` or `..`)",
            dir.display()
        ))),
    }
}

/// The parent directory of `dir`, `.` for a bare name.
fn parent_of(dir: &Path) -> PathBuf {
    match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// A refusal to write `dir`, with the reason and what to do.
fn refuse(dir: &Path, why: impl std::fmt::Display) -> Error {
    Error::config(format!(
        "output directory {}: {why}; nothing was changed",
        dir.display()
    ))
}

/// Error unless `given` (resolved: `abs`) may be written under `rules`.
fn check_replaceable(given: &Path, abs: &Path, rules: &OutputRules) -> Result<()> {
    let Ok(meta) = abs.symlink_metadata() else {
        return Ok(());
    };
    if meta.file_type().is_symlink() {
        return Err(refuse(
            given,
            "is a symbolic link; give the directory it points to, or a new directory",
        ));
    }
    if !meta.is_dir() {
        return Err(refuse(
            given,
            "exists and is not a directory; choose another output directory",
        ));
    }
    if let Some(why) = protected(abs, &rules.inputs) {
        return Err(refuse(
            given,
            format!("{why}, so it is never replaced, even with --force; choose a new directory"),
        ));
    }
    if !rules.force {
        return Err(refuse(
            given,
            "already exists; previous results are replaced only with --force \
             (or choose another output directory)",
        ));
    }
    if rules.marker.is_on(abs) || is_empty_dir(abs) {
        return Ok(());
    }
    let other = match rules.marker {
        Marker::Run if Marker::Mock.is_on(abs) => " (it holds a mock ensemble)",
        Marker::Mock if Marker::Run.is_on(abs) => " (it holds an analysis run)",
        _ => "",
    };
    Err(refuse(
        given,
        format!(
            "is not empty and was not written by formfactory{other}: it has no `{}` marker, \
             and --force replaces only a directory formfactory wrote; choose a new directory \
             or move its contents away yourself",
            rules.marker.file_name()
        ),
    ))
}

fn is_empty_dir(dir: &Path) -> bool {
    std::fs::read_dir(dir).is_ok_and(|mut d| d.next().is_none())
}

/// Why `dir` (resolved) must never be replaced, if it must not.
fn protected(dir: &Path, inputs: &[PathBuf]) -> Option<String> {
    let Ok(dir) = std::fs::canonicalize(dir) else {
        return Some("cannot be resolved to a real path".into());
    };
    if dir.parent().is_none() {
        return Some("is the filesystem root".into());
    }
    if let Some(home) = std::env::var_os("HOME").and_then(|h| std::fs::canonicalize(h).ok()) {
        if home.starts_with(&dir) {
            return Some(if home == dir {
                "is your home directory".into()
            } else {
                format!("contains your home directory {}", home.display())
            });
        }
    }
    if let Ok(cwd) = std::env::current_dir().and_then(std::fs::canonicalize) {
        if cwd.starts_with(&dir) {
            return Some(if cwd == dir {
                "is the current directory".into()
            } else {
                format!("contains the current directory {}", cwd.display())
            });
        }
    }
    for input in inputs {
        let Ok(real) = std::fs::canonicalize(input) else {
            continue;
        };
        if real.starts_with(&dir) {
            return Some(format!(
                "contains {}, an input of this run",
                input.display()
            ));
        }
    }
    None
}

/// Whether the process `pid` still runs (or may).
fn process_alive(pid: u32) -> bool {
    if pid == std::process::id() || !Path::new("/proc/self").exists() {
        // Without /proc there is no telling; keeping a leftover is the safe side.
        return true;
    }
    Path::new(&format!("/proc/{pid}")).exists()
}

/// Remove `.NAME.tmp-PID-N` and `.NAME.old-PID-N` siblings left by killed runs (only those
/// that carry `marker`), restoring the newest `.old` one if the final directory is missing.
fn clean_leftovers(
    parent: &Path,
    name: &str,
    marker: Marker,
    notes: &mut Vec<String>,
) -> Result<()> {
    let Ok(entries) = std::fs::read_dir(parent) else {
        return Ok(());
    };
    let mut stale_tmp = Vec::new();
    let mut stale_old = Vec::new();
    for entry in entries.flatten() {
        let file = entry.file_name().to_string_lossy().into_owned();
        let Some(rest) = file.strip_prefix(&format!(".{name}.")) else {
            continue;
        };
        let (kind, id) = match rest.split_once('-') {
            Some((kind @ ("tmp" | "old"), id)) => (kind, id),
            _ => continue,
        };
        let Some(pid) = id.split('-').next().and_then(|p| p.parse::<u32>().ok()) else {
            continue;
        };
        let path = entry.path();
        let is_dir = path.symlink_metadata().is_ok_and(|m| m.is_dir());
        if !is_dir || process_alive(pid) || !marker.is_on(&path) {
            continue;
        }
        let modified = path.symlink_metadata().and_then(|m| m.modified()).ok();
        if kind == "tmp" {
            stale_tmp.push(path);
        } else {
            stale_old.push((modified, path));
        }
    }
    for tmp in stale_tmp {
        if std::fs::remove_dir_all(&tmp).is_ok() {
            notes.push(format!(
                "removed {}, left by an interrupted run",
                tmp.display()
            ));
        }
    }
    stale_old.sort();
    let final_dir = parent.join(name);
    if final_dir.symlink_metadata().is_err() {
        if let Some((_, newest)) = stale_old.pop() {
            std::fs::rename(&newest, &final_dir).map_err(|e| Error::io(&newest, e))?;
            notes.push(format!(
                "restored the previous results {} from {}, hidden by an interrupted run",
                final_dir.display(),
                newest.display()
            ));
        }
    }
    for (_, old) in stale_old {
        if std::fs::remove_dir_all(&old).is_ok() {
            notes.push(format!(
                "removed {}, previous results an interrupted run had replaced",
                old.display()
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn siblings(parent: &Path) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(parent)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn bare_root_is_refused() {
        assert!(RunDir::create(Path::new("/"), true).is_err());
    }

    #[test]
    fn commit_into_missing_parent() {
        let root = tempfile::tempdir().unwrap();
        let final_dir = root.path().join("a/b/run");
        let run = RunDir::create(&final_dir, false).unwrap();
        assert!(run
            .path()
            .starts_with(std::fs::canonicalize(root.path().join("a/b")).unwrap()));
        std::fs::write(run.path().join("x.csv"), "x\n1\n").unwrap();
        assert!(!final_dir.exists());
        assert_eq!(run.commit().unwrap(), final_dir);
        assert_eq!(
            std::fs::read_to_string(final_dir.join("x.csv")).unwrap(),
            "x\n1\n"
        );
        assert!(Marker::Run.is_on(&final_dir));
        assert_eq!(siblings(&root.path().join("a/b")), vec!["run"]);
    }

    #[test]
    fn a_file_in_the_way_is_refused_even_with_force() {
        let root = tempfile::tempdir().unwrap();
        let f = root.path().join("out");
        std::fs::write(&f, "keep").unwrap();
        let err = RunDir::create(&f, true).unwrap_err().to_string();
        assert!(err.contains("not a directory"), "{err}");
        assert_eq!(std::fs::read_to_string(&f).unwrap(), "keep");
    }

    #[test]
    fn directory_appearing_during_the_run_is_not_overwritten() {
        let root = tempfile::tempdir().unwrap();
        let final_dir = root.path().join("run");
        let run = RunDir::create(&final_dir, false).unwrap();
        std::fs::create_dir(&final_dir).unwrap();
        std::fs::write(final_dir.join("other.txt"), "other").unwrap();
        assert!(run.commit().is_err());
        assert_eq!(
            std::fs::read_to_string(final_dir.join("other.txt")).unwrap(),
            "other"
        );
        assert_eq!(siblings(root.path()), vec!["run"]);
    }

    #[test]
    fn user_directory_survives_force() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("H");
        std::fs::create_dir_all(out.join("Documents")).unwrap();
        std::fs::write(out.join("Documents/thesis.tex"), "x").unwrap();
        let err = RunDir::create(&out, true).unwrap_err().to_string();
        assert!(err.contains("was not written by formfactory"), "{err}");
        assert_eq!(
            std::fs::read_to_string(out.join("Documents/thesis.tex")).unwrap(),
            "x"
        );
        assert_eq!(siblings(root.path()), vec!["H"]);
    }

    #[test]
    fn a_mock_directory_is_not_replaced_by_a_run() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("data");
        let rules = OutputRules {
            force: true,
            inputs: vec![],
            marker: Marker::Mock,
        };
        let m = RunDir::create_with(&out, &rules).unwrap();
        std::fs::write(m.path().join("twopt.csv"), "x").unwrap();
        m.commit().unwrap();
        let err = RunDir::create(&out, true).unwrap_err().to_string();
        assert!(err.contains("holds a mock ensemble"), "{err}");
        // The same kind is replaced.
        let m = RunDir::create_with(&out, &rules).unwrap();
        m.commit().unwrap();
        assert!(!out.join("twopt.csv").exists());
    }

    #[test]
    fn a_directory_holding_an_input_is_never_replaced() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("runs");
        RunDir::create(&out, false).unwrap().commit().unwrap();
        let input = out.join("sub/twopt.csv");
        std::fs::create_dir_all(input.parent().unwrap()).unwrap();
        std::fs::write(&input, "data").unwrap();
        let rules = OutputRules::run(true, &[&input]);
        let err = RunDir::create_with(&out, &rules).unwrap_err().to_string();
        assert!(err.contains("an input of this run"), "{err}");
        assert!(input.exists());
    }

    #[test]
    fn output_through_itself_is_resolved_once() {
        // `out/../out` with the pipeline elsewhere: the swap must not run through the
        // renamed directory, and no hidden sibling may be left behind.
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("out");
        RunDir::create(&out, false).unwrap().commit().unwrap();
        let odd = out.join("..").join("out");
        let run = RunDir::create(&odd, true).unwrap();
        std::fs::write(run.path().join("new.txt"), "new").unwrap();
        run.commit().unwrap();
        assert!(out.join("new.txt").exists());
        assert_eq!(siblings(root.path()), vec!["out"]);
    }

    #[test]
    fn leftovers_of_killed_runs_are_cleaned_and_hidden_results_restored() {
        let root = tempfile::tempdir().unwrap();
        let out = root.path().join("res");
        // A dead process id: beyond the kernel's pid_max (4194304 at most).
        let dead = 4_194_305u32;
        for kind in ["tmp", "old"] {
            let d = root.path().join(format!(".res.{kind}-{dead}-0"));
            std::fs::create_dir(&d).unwrap();
            std::fs::write(d.join(Marker::Run.file_name()), Marker::Run.contents()).unwrap();
            std::fs::write(d.join("which.txt"), kind).unwrap();
        }
        // Not ours (no marker): left alone.
        let foreign = root.path().join(format!(".res.tmp-{dead}-1"));
        std::fs::create_dir(&foreign).unwrap();
        let run = RunDir::create(&out, false);
        let err = run.unwrap_err().to_string();
        // The hidden previous result is back, so a run without --force now refuses.
        assert!(err.contains("already exists"), "{err}");
        assert_eq!(
            std::fs::read_to_string(out.join("which.txt")).unwrap(),
            "old"
        );
        assert_eq!(
            siblings(root.path()),
            vec![format!(".res.tmp-{dead}-1"), "res".to_string()]
        );
    }
}

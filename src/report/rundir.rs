//! The result directory of a run, written all-or-nothing.
//!
//! Files go into a fresh hidden sibling of the final directory (same parent, hence the same
//! filesystem); only a run that finishes moves it into place with `rename(2)`, which is
//! atomic. A failed or interrupted run therefore never leaves a half-written directory under
//! the final name, and previous results stay untouched unless the caller asked to replace
//! them (the write-to-temporary-then-rename pattern, common practice).

use crate::error::{Error, Result};
use std::io::ErrorKind;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};

/// Distinguishes temporary directories made by one process.
static COUNTER: AtomicUsize = AtomicUsize::new(0);

/// A result directory being written. Write into [`RunDir::path`], then [`RunDir::commit`].
/// Dropping it uncommitted removes the temporary directory and everything in it.
#[derive(Debug)]
pub struct RunDir {
    tmp: PathBuf,
    final_dir: PathBuf,
    force: bool,
    committed: bool,
}

impl RunDir {
    /// Start a run that will end up in `final_dir`. Fails at once if `final_dir` exists and
    /// `force` is false, or if it exists and is not a directory. Missing parent directories
    /// are created.
    pub fn create(final_dir: &Path, force: bool) -> Result<RunDir> {
        let name = final_dir
            .file_name()
            .ok_or_else(|| {
                Error::config(format!(
                    "output directory `{}` must end in a directory name",
                    final_dir.display()
                ))
            })?
            .to_string_lossy()
            .into_owned();
        check_replaceable(final_dir, force)?;
        let parent = parent_of(final_dir);
        std::fs::create_dir_all(&parent).map_err(|e| Error::io(&parent, e))?;
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
        Ok(RunDir {
            tmp,
            final_dir: final_dir.to_path_buf(),
            force,
            committed: false,
        })
    }

    /// The temporary directory to write the results into.
    pub fn path(&self) -> &Path {
        &self.tmp
    }

    /// Where the results will be after [`RunDir::commit`].
    pub fn final_dir(&self) -> &Path {
        &self.final_dir
    }

    /// Move the results into place and return the final path. An existing directory is
    /// refused without `force`; with `force` it is renamed aside, the new results renamed
    /// into place, and only then is the old directory deleted.
    pub fn commit(mut self) -> Result<PathBuf> {
        check_replaceable(&self.final_dir, self.force)?;
        let exists = self.final_dir.symlink_metadata().is_ok();
        if !exists {
            std::fs::rename(&self.tmp, &self.final_dir)
                .map_err(|e| Error::io(&self.final_dir, e))?;
            self.committed = true;
            return Ok(self.final_dir.clone());
        }
        let name = self
            .final_dir
            .file_name()
            .unwrap_or_default()
            .to_string_lossy();
        let old = parent_of(&self.final_dir).join(format!(
            ".{name}.old-{}-{}",
            std::process::id(),
            COUNTER.fetch_add(1, Ordering::Relaxed)
        ));
        std::fs::rename(&self.final_dir, &old).map_err(|e| Error::io(&self.final_dir, e))?;
        if let Err(e) = std::fs::rename(&self.tmp, &self.final_dir) {
            // Put the previous results back; the new ones are removed on drop.
            let _ = std::fs::rename(&old, &self.final_dir);
            return Err(Error::io(&self.final_dir, e));
        }
        self.committed = true;
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
        }
    }
}

/// The parent directory of `dir`, `.` for a bare name.
fn parent_of(dir: &Path) -> PathBuf {
    match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// Error unless `dir` is absent, or is a directory and `force` is set.
fn check_replaceable(dir: &Path, force: bool) -> Result<()> {
    let Ok(meta) = dir.symlink_metadata() else {
        return Ok(());
    };
    let message = if !meta.is_dir() {
        "exists and is not a directory; choose another output directory"
    } else if !force {
        "the output directory already exists; previous results are replaced only when forced \
         (or choose another output directory)"
    } else {
        return Ok(());
    };
    Err(Error::io(
        dir,
        std::io::Error::new(ErrorKind::AlreadyExists, message),
    ))
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
        assert!(run.path().starts_with(root.path().join("a/b")));
        std::fs::write(run.path().join("x.csv"), "x\n1\n").unwrap();
        assert!(!final_dir.exists());
        assert_eq!(run.commit().unwrap(), final_dir);
        assert_eq!(
            std::fs::read_to_string(final_dir.join("x.csv")).unwrap(),
            "x\n1\n"
        );
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
}

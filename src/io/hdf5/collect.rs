//! Gathering correlators from HDF5 files through a [`Mapping`]: find the files, walk each
//! file's datasets once, match their paths against the templates, and fill the data model
//! with the same rules as the CSV reader (sources averaged per configuration, duplicates and
//! missing data refused, errors naming file and dataset path). This module's walk is the
//! exact one; `fast.rs` holds the one tried first (see [`read_with`]).

use super::dataset::{read_block, TypeCache};
use super::files::{dataset_paths, layout_files};
use super::mapping::Mapping;
use super::open::open_file;
use super::template::{nearest, Captures, Template};
use super::walk::{describe_three, describe_two, Acc, Collected, Kind, Progress, Walk};
use crate::data::{ThreePointKey, TwoPointKey};
use crate::error::{Error, Result};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// Read the correlators a (non-packed) mapping describes. `t_extent` is the ensemble's `T`:
/// longer two-point time axes are cut to it (without it every two-point dataset keeps its
/// full length, which must then agree).
pub fn read_mapped(m: &Mapping, t_extent: Option<usize>, progress: Progress) -> Result<Collected> {
    read_with(m, t_extent, progress, Mode::Auto).map(|(c, _)| c)
}

/// Which walk reads the files.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) enum Mode {
    /// The fast walk ([`super::fast`]); this module's walk when the fast one declines.
    Auto,
    /// The fast walk only (an error when it declines; for tests).
    #[cfg_attr(not(test), allow(dead_code))]
    Fast,
    /// This module's walk only (for tests).
    #[cfg_attr(not(test), allow(dead_code))]
    Exact,
}

/// [`read_mapped`] with a choice of walk; also returns the fast walk's counts when it read
/// the files.
///
/// The fast walk reads the common layouts at less cost per dataset; it declines a file (and
/// the read starts again with this module's walk, from the first file) at anything it does
/// not handle exactly as this walk would and at every error, so the data, the notes and every
/// error message are this walk's.
pub(super) fn read_with(
    m: &Mapping,
    t_extent: Option<usize>,
    progress: Progress,
    mode: Mode,
) -> Result<(Collected, Option<super::raw::Counts>)> {
    let (Some(two_tpl), Some(three_tpl)) = (&m.twopt, &m.threept) else {
        return Err(Error::config(
            "data.hdf5: the dataset templates are missing",
        ));
    };
    let (files, configs, config_axis) = layout_files(m)?;
    let new_walk = || Walk {
        m,
        two_tpl,
        three_tpl,
        t_extent,
        config_axis,
        two: Acc::new(configs.len()),
        three: Acc::new(configs.len()),
        n_datasets: 0,
        ignored: 0,
        types: TypeCache::default(),
    };
    let fast = if mode == Mode::Exact {
        None
    } else {
        super::fast::walk(new_walk(), &files, &configs, progress)
    };
    let (walk, counts) = match fast {
        Some((walk, counts)) => (walk, Some(counts)),
        None if mode == Mode::Fast => {
            return Err(Error::config("the fast walk declined these files"));
        }
        None => (exact_walk(new_walk(), &files, &configs, progress)?, None),
    };
    if walk.n_datasets == 0 {
        return Err(Error::Table {
            path: files[0].0.clone(),
            message: format!(
                "no dataset matches `{}` or `{}`",
                two_tpl.text(),
                three_tpl.text()
            ),
        });
    }
    walk.finish(&files[0].0, files.len(), configs)
        .map(|c| (c, counts))
}

/// Walk every file with this module's walk: list each file's datasets, then read those that
/// match a template.
fn exact_walk<'a>(
    mut walk: Walk<'a>,
    files: &[(PathBuf, Captures)],
    configs: &[i64],
    progress: Progress,
) -> Result<Walk<'a>> {
    let mut first_paths: Option<(PathBuf, usize)> = None;
    for (i, (path, file_caps)) in files.iter().enumerate() {
        let (names, seen) = walk.file(path, file_caps, configs)?;
        match &first_paths {
            None => first_paths = Some((path.clone(), seen)),
            Some((first, first_seen)) => {
                if seen < *first_seen {
                    return Err(missing_error(
                        path,
                        file_caps,
                        &names,
                        first,
                        walk.two_tpl,
                        walk.three_tpl,
                        &walk.two,
                        &walk.three,
                    ));
                }
            }
        }
        progress(i + 1, files.len());
    }
    Ok(walk)
}

impl Walk<'_> {
    /// Read every matching dataset of one file. Returns the file's dataset paths and how
    /// many of them matched a template.
    fn file(
        &mut self,
        path: &Path,
        file_caps: &Captures,
        configs: &[i64],
    ) -> Result<(Vec<String>, usize)> {
        let (h5, len) = open_file(path)?;
        let names = dataset_paths(&h5, path)?;
        let (rows, axis) = self.rows(file_caps, configs);
        let file = OpenFile {
            h5: &h5,
            path,
            len,
            caps: file_caps,
            rows: &rows,
            axis,
        };
        let mut seen = 0usize;
        for name in &names {
            if self.dataset(&file, name)? {
                seen += 1;
            } else {
                self.ignored += 1;
            }
        }
        self.n_datasets += seen;
        Ok((names, seen))
    }

    /// Match one dataset path against the templates and, when it matches, read it into its
    /// channel. Returns whether it matched.
    fn dataset(&mut self, file: &OpenFile, name: &str) -> Result<bool> {
        let (caps, is_two) = if let Some(c) = self.two_tpl.matches(name) {
            (c, true)
        } else if let Some(c) = self.three_tpl.matches(name) {
            (c, false)
        } else {
            return Ok(false);
        };
        let (kind, source) = self.channel(file.caps, file.path, name, &caps, is_two)?;
        let (h5, path, len, axis, rows) = (file.h5, file.path, file.len, file.axis, file.rows);
        match kind {
            Kind::Two(key) => {
                let block = read_block(h5, path, len, name, axis, self.t_extent, &mut self.types)?;
                self.two
                    .add(key, &block, rows, source, &caps, path, name, describe_two)?;
            }
            Kind::Three(key) => {
                let need = key.tsep as usize + 1;
                let block = read_block(h5, path, len, name, axis, Some(need), &mut self.types)?;
                self.three
                    .add(key, &block, rows, source, &caps, path, name, describe_three)?;
            }
        }
        Ok(true)
    }
}

/// One open file and where its datasets' rows go.
struct OpenFile<'a> {
    h5: &'a hdf5::File,
    path: &'a Path,
    len: u64,
    caps: &'a Captures,
    rows: &'a [usize],
    axis: Option<usize>,
}

/// The error for a file that lacks datasets the first file had: the first missing channel's
/// expected path and the nearest path the file does have.
#[allow(clippy::too_many_arguments)]
fn missing_error(
    path: &Path,
    file_caps: &Captures,
    names: &[String],
    first: &Path,
    two_tpl: &Template,
    three_tpl: &Template,
    two: &Acc<TwoPointKey>,
    three: &Acc<ThreePointKey>,
) -> Error {
    let present: BTreeSet<&str> = names.iter().map(String::as_str).collect();
    let expect = |tpl: &Template, caps: &Captures| {
        tpl.expand(|n| {
            file_caps
                .iter()
                .chain(caps.iter())
                .find(|(m, _)| *m == n)
                .map(|(_, v)| v.clone())
        })
    };
    let expected = two
        .channels()
        .map(|c| expect(two_tpl, &c.caps))
        .chain(three.channels().map(|c| expect(three_tpl, &c.caps)))
        .find(|p| !present.contains(p.as_str()));
    let message = match expected {
        Some(p) => {
            let near = nearest(&p, names.iter().map(String::as_str))
                .map_or("the file has no dataset".to_string(), |n| {
                    format!("nearest existing path: `{n}`")
                });
            format!(
                "dataset `{p}` is missing (the first file {} has it); {near}",
                first.display()
            )
        }
        None => format!(
            "has fewer matching datasets than the first file {}",
            first.display()
        ),
    };
    Error::Table {
        path: path.to_path_buf(),
        message,
    }
}

//! Gathering correlators from HDF5 files through a [`Mapping`]: find the files, walk each
//! file's datasets once, match their paths against the templates, and fill the data model
//! with the same rules as the CSV reader (sources averaged per configuration, duplicates and
//! missing data refused, errors naming file and dataset path).

use super::dataset::{dataset_error, open_file, read_block, Block, TypeCache};
use super::files::{dataset_paths, layout_files};
use super::mapping::{Fields, Mapping};
use super::template::{nearest, Captures, Template};
use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// What the HDF5 reader produced.
pub struct Collected {
    /// Two-point data.
    pub twopt: TwoPointData,
    /// Three-point data.
    pub threept: ThreePointData,
    /// One sentence per thing worth logging.
    pub notes: Vec<String>,
}

/// Per-file progress: called with (files done, files in all).
pub type Progress<'a> = &'a dyn Fn(usize, usize);

/// A channel under construction: configuration-major sums and counts.
struct Chan {
    n_t: usize,
    re: Vec<f64>,
    im: Vec<f64>,
    count: Vec<u32>,
    sources: Vec<Vec<i64>>,
    /// Dataset captures of the first occurrence (to name the path expected elsewhere).
    caps: Captures,
    first: (PathBuf, String),
}

/// Channels of one kind.
pub(super) struct Acc<K> {
    /// Channel key -> its place in `slots`.
    chans: BTreeMap<K, usize>,
    /// The channels in the order they were first seen.
    slots: Vec<Chan>,
    n_cfg: usize,
}

impl<K: Ord + Clone> Acc<K> {
    fn new(n_cfg: usize) -> Self {
        Acc {
            chans: BTreeMap::new(),
            slots: Vec::new(),
            n_cfg,
        }
    }

    /// The channels in key order.
    fn channels(&self) -> impl Iterator<Item = &Chan> {
        self.chans.values().filter_map(|&i| self.slots.get(i))
    }

    /// The place of channel `key`; a new channel (with `n_t` time slices, first seen as
    /// dataset `name` of `file` with captures `caps`) is created empty.
    pub(super) fn slot(
        &mut self,
        key: &K,
        n_t: usize,
        caps: &Captures,
        file: &Path,
        name: &str,
    ) -> usize {
        if let Some(&i) = self.chans.get(key) {
            return i;
        }
        let n_cfg = self.n_cfg;
        self.slots.push(Chan {
            n_t,
            re: vec![0.0; n_cfg * n_t],
            im: vec![0.0; n_cfg * n_t],
            count: vec![0; n_cfg],
            sources: vec![Vec::new(); n_cfg],
            caps: caps.clone(),
            first: (file.to_path_buf(), name.to_string()),
        });
        self.chans.insert(key.clone(), self.slots.len() - 1);
        self.slots.len() - 1
    }

    /// Add block rows for configurations `cfgs` (indices into the configuration list).
    #[allow(clippy::too_many_arguments)]
    pub(super) fn add(
        &mut self,
        key: K,
        block: &Block,
        cfgs: &[usize],
        source: Option<i64>,
        caps: &Captures,
        file: &Path,
        name: &str,
        describe: impl Fn(&K) -> String,
    ) -> Result<()> {
        let n_t = block.n_t;
        let value = |row: usize, t: usize| (block.re[row * n_t + t], block.im[row * n_t + t]);
        self.add_with(key, n_t, cfgs, source, caps, file, name, describe, value)
    }

    /// Add the rows of a dataset with `n_t` time slices for configurations `cfgs`; `value(row,
    /// t)` is the (real, imaginary) pair of a row and time slice. The sums run in the same
    /// order whoever supplies the values, so every way of reading gives the same bits.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn add_with(
        &mut self,
        key: K,
        n_t: usize,
        cfgs: &[usize],
        source: Option<i64>,
        caps: &Captures,
        file: &Path,
        name: &str,
        describe: impl Fn(&K) -> String,
        value: impl Fn(usize, usize) -> (f64, f64),
    ) -> Result<()> {
        let slot = self.slot(&key, n_t, caps, file, name);
        self.add_at(slot, &key, n_t, cfgs, source, file, name, describe, value)
    }

    /// [`Acc::add_with`] for the channel at `slot` (from [`Acc::slot`] for `key`).
    #[allow(clippy::too_many_arguments)]
    pub(super) fn add_at(
        &mut self,
        slot: usize,
        key: &K,
        n_t: usize,
        cfgs: &[usize],
        source: Option<i64>,
        file: &Path,
        name: &str,
        describe: impl Fn(&K) -> String,
        value: impl Fn(usize, usize) -> (f64, f64),
    ) -> Result<()> {
        let Some(chan) = self.slots.get_mut(slot) else {
            return Err(dataset_error(file, name, "internal error: no such channel"));
        };
        if chan.n_t != n_t {
            return Err(dataset_error(
                file,
                name,
                format!(
                    "has {} time slices where {} `{}` has {}; every dataset of a channel needs the same length",
                    n_t,
                    chan.first.0.display(),
                    chan.first.1,
                    chan.n_t
                ),
            ));
        }
        for (row, &c) in cfgs.iter().enumerate() {
            let dup = match source {
                Some(s) => chan.sources[c].contains(&s),
                None => chan.count[c] > 0,
            };
            if dup {
                let what = source.map_or(String::new(), |s| format!(" and source {s}"));
                return Err(dataset_error(
                    file,
                    name,
                    format!(
                        "duplicate data: {} at configuration index {c}{what} was already read",
                        describe(key)
                    ),
                ));
            }
            if let Some(s) = source {
                chan.sources[c].push(s);
            }
            chan.count[c] += 1;
            for t in 0..n_t {
                let (re, im) = value(row, t);
                chan.re[c * n_t + t] += re;
                chan.im[c * n_t + t] += im;
            }
        }
        Ok(())
    }

    /// Average and transpose to the time-major data model; every configuration must be
    /// present. Returns the channels and the (min, max) number of sources averaged.
    fn finish(
        self,
        configs: &[i64],
        describe: impl Fn(&K) -> String,
    ) -> Result<(BTreeMap<K, Series>, (u32, u32))> {
        let mut out = BTreeMap::new();
        let (mut lo, mut hi) = (u32::MAX, 0);
        let mut slots: Vec<Option<Chan>> = self.slots.into_iter().map(Some).collect();
        for (key, i) in self.chans {
            let Some(chan) = slots.get_mut(i).and_then(Option::take) else {
                continue;
            };
            let n_cfg = self.n_cfg;
            if let Some(c) = chan.count.iter().position(|&n| n == 0) {
                return Err(Error::Table {
                    path: chan.first.0.clone(),
                    message: format!(
                        "{} (dataset `{}`) has no data for configuration {}",
                        describe(&key),
                        chan.first.1,
                        configs[c]
                    ),
                });
            }
            let mut s = Series::zeros(chan.n_t, n_cfg);
            for c in 0..n_cfg {
                let n = chan.count[c];
                lo = lo.min(n);
                hi = hi.max(n);
                let n = f64::from(n);
                for t in 0..chan.n_t {
                    s.re[t * n_cfg + c] = chan.re[c * chan.n_t + t] / n;
                    s.im[t * n_cfg + c] = chan.im[c * chan.n_t + t] / n;
                }
            }
            out.insert(key, s);
        }
        Ok((out, (lo.min(hi), hi)))
    }
}

/// Which kind a dataset path belongs to.
#[derive(Clone)]
pub(super) enum Kind {
    Two(TwoPointKey),
    Three(ThreePointKey),
}

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
) -> Result<(Collected, Option<super::fast::Counts>)> {
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

/// The state of one walk over the files of a mapping: the templates, the channels gathered
/// so far and the counts for the notes.
pub(super) struct Walk<'a> {
    m: &'a Mapping,
    pub(super) two_tpl: &'a Template,
    pub(super) three_tpl: &'a Template,
    pub(super) t_extent: Option<usize>,
    pub(super) config_axis: bool,
    pub(super) two: Acc<TwoPointKey>,
    pub(super) three: Acc<ThreePointKey>,
    pub(super) n_datasets: usize,
    pub(super) ignored: usize,
    /// The dataset types seen so far (see [`TypeCache`]).
    pub(super) types: TypeCache,
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

    /// The channel key and source position of dataset `name` (of file `path`, whose path gave
    /// `file_caps`) that matched a template with captures `caps`; a `{config}` in the dataset
    /// path must agree with the file's.
    pub(super) fn channel(
        &self,
        file_caps: &Captures,
        path: &Path,
        name: &str,
        caps: &Captures,
        is_two: bool,
    ) -> Result<(Kind, Option<i64>)> {
        let fields = Fields {
            file: file_caps,
            dataset: caps,
            fixed: &self.m.fixed,
        };
        let bad = |e: String| dataset_error(path, name, e);
        let kind = if is_two {
            Kind::Two(fields.twopt_key().map_err(bad)?)
        } else {
            Kind::Three(fields.threept_key().map_err(bad)?)
        };
        let source = fields.source().map_err(bad)?;
        if let Some(c) = fields.get("config").filter(|_| !self.config_axis) {
            // A `{config}` in the dataset path must agree with the file's.
            let fc = Fields {
                file: file_caps,
                dataset: &Vec::new(),
                fixed: &self.m.fixed,
            };
            if fc.get("config") != Some(c) {
                return Err(bad(format!(
                    "names configuration {c} inside the file of configuration {}",
                    fc.get("config").unwrap_or("?")
                )));
            }
        }
        Ok((kind, source))
    }

    /// The rows of each dataset of a file: every configuration (configuration axis, then also
    /// returned as the axis length) or the one its path names.
    pub(super) fn rows(
        &self,
        file_caps: &Captures,
        configs: &[i64],
    ) -> (Vec<usize>, Option<usize>) {
        let n_cfg = configs.len();
        if self.config_axis {
            ((0..n_cfg).collect(), Some(n_cfg))
        } else {
            let f = Fields {
                file: file_caps,
                dataset: &Vec::new(),
                fixed: &self.m.fixed,
            };
            let c = f.config().unwrap_or_default();
            (vec![configs.binary_search(&c).unwrap_or_default()], None)
        }
    }

    /// Average the gathered channels into the data model and write the notes. `first` is
    /// the first file (named by the errors about missing kinds).
    fn finish(self, first: &Path, n_files: usize, configs: Vec<i64>) -> Result<Collected> {
        let n_cfg = configs.len();
        let (twopt, src2) = self.two.finish(&configs, describe_two)?;
        let (threept, src3) = self.three.finish(&configs, describe_three)?;
        if twopt.is_empty() || threept.is_empty() {
            let (kind, tpl) = if twopt.is_empty() {
                ("two-point", self.two_tpl)
            } else {
                ("three-point", self.three_tpl)
            };
            return Err(Error::Table {
                path: first.to_path_buf(),
                message: format!("no {kind} dataset matches `{}`", tpl.text()),
            });
        }
        let mut notes = vec![format!(
            "read {} datasets from {n_files} HDF5 file(s) into {} two-point and {} three-point channels on {n_cfg} configurations",
            self.n_datasets,
            twopt.len(),
            threept.len()
        )];
        if self.ignored > 0 {
            notes.push(format!(
                "ignored {} dataset(s) that match neither dataset template",
                self.ignored
            ));
        }
        if self.m.provides_source() {
            let (lo, hi) = (src2.0.min(src3.0), src2.1.max(src3.1));
            notes.push(format!(
                "averaged between {lo} and {hi} sources per configuration and data point"
            ));
        }
        Ok(Collected {
            twopt: TwoPointData {
                configs: configs.clone(),
                channels: twopt,
            },
            threept: ThreePointData {
                configs,
                channels: threept,
            },
            notes,
        })
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

pub(super) fn describe_two(k: &TwoPointKey) -> String {
    format!("two-point {}", crate::io::describe_twopt(k))
}

pub(super) fn describe_three(k: &ThreePointKey) -> String {
    format!("three-point {}", crate::io::describe_threept(k))
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

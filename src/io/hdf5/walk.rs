//! The state of a walk over the files of a mapping, shared by the two walks (`collect.rs`,
//! `fast.rs`): the channels gathered so far (configuration-major sums, counts and source
//! positions, added in file order so that both walks give the same bits), the channel key of
//! a matched dataset path, and the averaging into the data model at the end.

use super::dataset::{dataset_error, Block, TypeCache};
use super::mapping::{Fields, Mapping};
use super::template::{Captures, Template};
use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use std::collections::BTreeMap;
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
pub(super) struct Chan {
    n_t: usize,
    re: Vec<f64>,
    im: Vec<f64>,
    count: Vec<u32>,
    sources: Vec<Vec<i64>>,
    /// Dataset captures of the first occurrence (to name the path expected elsewhere).
    pub(super) caps: Captures,
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
    pub(super) fn new(n_cfg: usize) -> Self {
        Acc {
            chans: BTreeMap::new(),
            slots: Vec::new(),
            n_cfg,
        }
    }

    /// The channels in key order.
    pub(super) fn channels(&self) -> impl Iterator<Item = &Chan> {
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

/// The state of one walk over the files of a mapping: the templates, the channels gathered
/// so far and the counts for the notes.
pub(super) struct Walk<'a> {
    pub(super) m: &'a Mapping,
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
    pub(super) fn finish(
        self,
        first: &Path,
        n_files: usize,
        configs: Vec<i64>,
    ) -> Result<Collected> {
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

pub(super) fn describe_two(k: &TwoPointKey) -> String {
    format!("two-point {}", crate::io::describe_twopt(k))
}

pub(super) fn describe_three(k: &ThreePointKey) -> String {
    format!("three-point {}", crate::io::describe_threept(k))
}

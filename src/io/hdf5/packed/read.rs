//! Reading the packed file: the index and configurations are checked first, then each
//! block's datasets (type, shape, size against the file) before any channel is read.
//!
//! Every read walks the channels one at a time through [`visit_packed`]: a [`Visitor`] sees
//! each channel's series in a buffer that the walk keeps. [`read_packed`] takes the buffers
//! (each channel keeps its own, as the data model needs); a streaming visitor (`inspect`,
//! `check`) leaves them in place, so the next channel of the block is read into the same
//! memory and the walk holds one channel's values at a time, whatever the number of channels.

use super::values::{first_non_finite, ChannelValues};
use super::{Index, FORMAT, VERSION};
use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use crate::io::hdf5::dataset::dataset_error;
use crate::io::hdf5::open::open_file;
use crate::io::hdf5::PackedVisitor as Visitor;
use std::collections::BTreeMap;
use std::path::Path;

/// Read a packed file.
pub fn read_packed(path: &Path) -> Result<(TwoPointData, ThreePointData)> {
    let mut load = Load::default();
    visit_packed(path, &mut load)?;
    Ok((load.two, load.three))
}

/// The visitor of [`read_packed`]: every channel keeps the buffers it was read into.
#[derive(Default)]
struct Load {
    two: TwoPointData,
    three: ThreePointData,
}

impl Visitor for Load {
    fn configs(&mut self, configs: &[i64]) -> Result<()> {
        self.two.configs = configs.to_vec();
        self.three.configs = configs.to_vec();
        Ok(())
    }

    fn twopt(&mut self, key: TwoPointKey, series: &mut Series) -> Result<()> {
        self.two.channels.insert(key, take(series));
        Ok(())
    }

    fn threept(&mut self, key: ThreePointKey, series: &mut Series) -> Result<()> {
        self.three.channels.insert(key, take(series));
        Ok(())
    }
}

/// The series with its values, leaving empty vectors behind.
fn take(s: &mut Series) -> Series {
    Series {
        n_cfg: s.n_cfg,
        n_t: s.n_t,
        re: std::mem::take(&mut s.re),
        im: std::mem::take(&mut s.im),
    }
}

/// Walk a packed file channel by channel (see [`Visitor`]). Channels of equal key are passed
/// on as they come (the file's writer never repeats one; [`read_packed`] keeps the last).
pub fn visit_packed(path: &Path, visitor: &mut dyn Visitor) -> Result<()> {
    let (f, len) = open_file(path)?;
    let index: Index = {
        let raw = read_exact::<u8>(&f, path, len, "formfactory")?;
        serde_json::from_slice(&raw).map_err(|e| {
            dataset_error(
                path,
                "formfactory",
                format!("is not a packed-file index: {e}"),
            )
        })?
    };
    if index.format != FORMAT || index.version != VERSION {
        return Err(Error::Table {
            path: path.to_path_buf(),
            message: format!(
                "packed file of format `{}` version {}; this build reads `{FORMAT}` version {VERSION}",
                index.format, index.version
            ),
        });
    }
    let configs = read_exact::<i64>(&f, path, len, "configs")?;
    let n_cfg = configs.len();
    if n_cfg == 0 || configs.windows(2).any(|w| w[0] >= w[1]) {
        return Err(dataset_error(
            path,
            "configs",
            "must list at least one configuration in strictly ascending order",
        ));
    }
    visitor.configs(&configs)?;
    drop(configs);
    let mut buffer = Series {
        n_cfg,
        n_t: 0,
        re: Vec::new(),
        im: Vec::new(),
    };
    if !index.twopt.is_empty() {
        let n_t = f
            .dataset("twopt/re")
            .map(|d| d.shape().get(1).copied().unwrap_or(0))
            .map_err(|e| dataset_error(path, "twopt/re", e))?;
        let mut block = Block::open(&f, path, len, "twopt", index.twopt.len(), n_t, n_cfg)?;
        for key in index.twopt {
            block.next_channel(&mut buffer)?;
            visitor.twopt(key, &mut buffer)?;
        }
    }
    let mut by_tsep: BTreeMap<u32, Vec<ThreePointKey>> = BTreeMap::new();
    for k in index.threept {
        by_tsep.entry(k.tsep).or_default().push(k);
    }
    for (tsep, keys) in by_tsep {
        let group = format!("threept/tsep{tsep}");
        let n_t = tsep as usize + 1;
        let mut block = Block::open(&f, path, len, &group, keys.len(), n_t, n_cfg)?;
        for key in keys {
            block.next_channel(&mut buffer)?;
            visitor.threept(key, &mut buffer)?;
        }
    }
    Ok(())
}

/// The `re` and `im` datasets of one block, of shape `[n, n_t, n_cfg]`, read channel by
/// channel (see [`ChannelValues`]).
struct Block<'a> {
    re: ChannelValues<'a>,
    im: ChannelValues<'a>,
    n_t: usize,
    /// The next channel's index.
    next: usize,
}

impl<'a> Block<'a> {
    fn open(
        f: &hdf5::File,
        path: &'a Path,
        len: u64,
        group: &str,
        n: usize,
        n_t: usize,
        n_cfg: usize,
    ) -> Result<Self> {
        let shape = [n, n_t, n_cfg];
        let [re, im] = [format!("{group}/re"), format!("{group}/im")].map(|name| {
            open_exact::<f64>(f, path, len, &name, Some(&shape))
                .and_then(|ds| ChannelValues::new(ds, n_t * n_cfg, len, path, name))
        });
        Ok(Block {
            re: re?,
            im: im?,
            n_t,
            next: 0,
        })
    }

    /// Read the next channel into `s` (its vectors reused when they are large enough), its
    /// values checked finite.
    fn next_channel(&mut self, s: &mut Series) -> Result<()> {
        let c = self.next;
        self.next += 1;
        s.n_t = self.n_t;
        self.re.next_channel_into(&mut s.re)?;
        self.im.next_channel_into(&mut s.im)?;
        for (values, part) in [(&s.re, &self.re), (&s.im, &self.im)] {
            if let Some(i) = first_non_finite(values) {
                return Err(dataset_error(
                    part.path(),
                    part.name(),
                    format!(
                        "non-finite value at channel {c}, time {}, configuration index {}",
                        i / s.n_cfg,
                        i % s.n_cfg
                    ),
                ));
            }
        }
        Ok(())
    }
}

/// Read a whole one-axis dataset of element type `T` (see [`open_exact`]).
fn read_exact<T: hdf5::H5Type>(
    f: &hdf5::File,
    path: &Path,
    len: u64,
    name: &str,
) -> Result<Vec<T>> {
    open_exact::<T>(f, path, len, name, None)?
        .read_raw::<T>()
        .map_err(|e| dataset_error(path, name, format!("cannot read: {e}")))
}

/// Open dataset `name` whose stored element type must be exactly `T`'s class and size, with
/// its shape checked against `shape` (one axis when `None`) and its size against the file
/// size before anything is allocated.
fn open_exact<T: hdf5::H5Type>(
    f: &hdf5::File,
    path: &Path,
    len: u64,
    name: &str,
    shape: Option<&[usize]>,
) -> Result<hdf5::Dataset> {
    let err = |m: String| dataset_error(path, name, m);
    let ds = f.dataset(name).map_err(|e| {
        err(format!(
            "missing or unreadable ({e}); is this a packed file?"
        ))
    })?;
    let dtype = ds.dtype().map_err(|e| err(e.to_string()))?;
    let have = dtype.to_descriptor().map_err(|e| err(e.to_string()))?;
    let want = T::type_descriptor();
    if have != want {
        return Err(err(format!("has type {have}; expected {want}")));
    }
    let got = ds.shape();
    if let Some(s) = shape {
        if got != s {
            return Err(err(format!("has shape {got:?}; expected {s:?}")));
        }
    } else if got.len() != 1 {
        return Err(err(format!("has shape {got:?}; expected one axis")));
    }
    let bytes = got
        .iter()
        .try_fold(dtype.size() as u64, |a, &d| a.checked_mul(d as u64));
    if bytes.is_none_or(|b| b > len) || !ds.filters().is_empty() {
        return Err(err(format!(
            "claims shape {got:?}, more than the file of {len} bytes holds (damaged or truncated?)"
        )));
    }
    Ok(ds)
}

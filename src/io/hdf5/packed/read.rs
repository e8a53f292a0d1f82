//! Reading the packed file: the index and configurations are checked first, then each
//! block's datasets (type, shape, size against the file) before any channel is read.

use super::values::{first_non_finite, ChannelValues};
use super::{Index, FORMAT, VERSION};
use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData};
use crate::error::{Error, Result};
use crate::io::hdf5::dataset::{dataset_error, open_file};
use std::collections::BTreeMap;
use std::path::Path;

/// Read a packed file.
pub fn read_packed(path: &Path) -> Result<(TwoPointData, ThreePointData)> {
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
    let mut two = TwoPointData {
        configs: configs.clone(),
        channels: BTreeMap::new(),
    };
    if !index.twopt.is_empty() {
        let n_t = f
            .dataset("twopt/re")
            .map(|d| d.shape().get(1).copied().unwrap_or(0))
            .map_err(|e| dataset_error(path, "twopt/re", e))?;
        let series = read_series(&f, path, len, "twopt", index.twopt.len(), n_t, n_cfg)?;
        two.channels = index.twopt.into_iter().zip(series).collect();
    }
    let mut three = ThreePointData {
        configs,
        channels: BTreeMap::new(),
    };
    let mut by_tsep: BTreeMap<u32, Vec<ThreePointKey>> = BTreeMap::new();
    for k in index.threept {
        by_tsep.entry(k.tsep).or_default().push(k);
    }
    for (tsep, keys) in by_tsep {
        let group = format!("threept/tsep{tsep}");
        let series = read_series(&f, path, len, &group, keys.len(), tsep as usize + 1, n_cfg)?;
        three.channels.extend(keys.into_iter().zip(series));
    }
    Ok((two, three))
}

/// Read `group/re` and `group/im` of shape `[n, n_t, n_cfg]` into `n` series, each channel
/// straight into the buffers its series keeps (see [`ChannelValues`]).
fn read_series(
    f: &hdf5::File,
    path: &Path,
    len: u64,
    group: &str,
    n: usize,
    n_t: usize,
    n_cfg: usize,
) -> Result<Vec<Series>> {
    let shape = [n, n_t, n_cfg];
    let names = [format!("{group}/re"), format!("{group}/im")];
    let open = |name: &'_ str| -> Result<hdf5::Dataset> {
        open_exact::<f64>(f, path, len, name, Some(&shape))
    };
    let mut re = ChannelValues::new(open(&names[0])?, n_t * n_cfg, len, path, &names[0])?;
    let mut im = ChannelValues::new(open(&names[1])?, n_t * n_cfg, len, path, &names[1])?;
    (0..n)
        .map(|c| {
            let s = Series {
                n_cfg,
                n_t,
                re: re.next_channel()?,
                im: im.next_channel()?,
            };
            for (values, name) in [(&s.re, &names[0]), (&s.im, &names[1])] {
                if let Some(i) = first_non_finite(values) {
                    return Err(dataset_error(
                        path,
                        name,
                        format!(
                            "non-finite value at channel {c}, time {}, configuration index {}",
                            i / n_cfg,
                            i % n_cfg
                        ),
                    ));
                }
            }
            Ok(s)
        })
        .collect()
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

//! The packed ensemble file: every correlator of an ensemble in a few large contiguous
//! datasets with the configuration as an axis, so that reading it costs a handful of library
//! calls and runs at disk-cache speed (per-dataset overhead, not bytes, dominates reading
//! many small HDF5 datasets).
//!
//! Layout (version 1):
//! - `/formfactory`: UTF-8 JSON bytes (`u8`) with `format`, `version` and the channel keys
//!   in order (`twopt`, `threept`);
//! - `/configs`: `i64[n_cfg]`, ascending;
//! - `/twopt/re`, `/twopt/im`: `f64[n_channels, T, n_cfg]`;
//! - `/threept/tsep{N}/re`, `/threept/tsep{N}/im`: `f64[n_channels, N + 1, n_cfg]`, one
//!   group per `tsep`, channels in key order.
//!
//! The time-major, configuration-contiguous order is that of [`crate::data::Series`], so a
//! channel is one slice of the read buffer.

use super::dataset::{dataset_error, open_file};
use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;

/// The `format` value of the index.
const FORMAT: &str = "formfactory-packed";
/// The layout version written and read.
const VERSION: u32 = 1;

#[derive(Serialize, Deserialize)]
struct Index {
    format: String,
    version: u32,
    twopt: Vec<TwoPointKey>,
    threept: Vec<ThreePointKey>,
}

fn h5err(path: &Path) -> impl Fn(hdf5::Error) -> Error + '_ {
    move |e| Error::Table {
        path: path.to_path_buf(),
        message: format!("cannot write the packed file: {e}"),
    }
}

/// Write `two` and `three` (on the same configurations) as a packed file at `out`,
/// atomically (a temporary file in the same directory renamed into place).
pub fn write_packed(out: &Path, two: &TwoPointData, three: &ThreePointData) -> Result<()> {
    if two.configs != three.configs {
        return Err(Error::config(
            "the two- and three-point data cover different configurations; pack them on common configurations",
        ));
    }
    let dir = match out.parent() {
        Some(d) if !d.as_os_str().is_empty() => d,
        _ => Path::new("."),
    };
    let tmp = tempfile::Builder::new()
        .prefix(".formfactory-pack")
        .suffix(".h5")
        .tempfile_in(dir)
        .map_err(|e| Error::io(dir, e))?;
    let e = h5err(out);
    {
        let f = hdf5::File::create(tmp.path()).map_err(&e)?;
        let index = Index {
            format: FORMAT.into(),
            version: VERSION,
            twopt: two.channels.keys().cloned().collect(),
            threept: three.channels.keys().cloned().collect(),
        };
        let json = serde_json::to_vec(&index).map_err(|x| Error::config(x.to_string()))?;
        f.new_dataset_builder()
            .with_data(&json)
            .create("formfactory")
            .map_err(&e)?;
        f.new_dataset_builder()
            .with_data(&two.configs)
            .create("configs")
            .map_err(&e)?;
        let n_cfg = two.configs.len();
        let g = f.create_group("twopt").map_err(&e)?;
        write_block(&g, two.channels.values(), n_cfg, &e)?;
        let g3 = f.create_group("threept").map_err(&e)?;
        let mut by_tsep: BTreeMap<u32, Vec<&Series>> = BTreeMap::new();
        for (k, s) in &three.channels {
            by_tsep.entry(k.tsep).or_default().push(s);
        }
        for (tsep, list) in by_tsep {
            let g = g3.create_group(&format!("tsep{tsep}")).map_err(&e)?;
            write_block(&g, list.into_iter(), n_cfg, &e)?;
        }
        f.close().map_err(&e)?;
    }
    crate::io::hdf5::persist(tmp, out)
}

fn write_block<'a>(
    g: &hdf5::Group,
    series: impl Iterator<Item = &'a Series>,
    n_cfg: usize,
    e: &impl Fn(hdf5::Error) -> Error,
) -> Result<()> {
    let (mut re, mut im, mut n, mut n_t) = (Vec::new(), Vec::new(), 0usize, None);
    for s in series {
        if *n_t.get_or_insert(s.n_t) != s.n_t {
            return Err(Error::config(
                "channels packed together need the same number of time slices",
            ));
        }
        re.extend_from_slice(&s.re);
        im.extend_from_slice(&s.im);
        n += 1;
    }
    let shape = [n, n_t.unwrap_or(0), n_cfg];
    for (name, data) in [("re", &re), ("im", &im)] {
        g.new_dataset::<f64>()
            .shape(shape)
            .create(name)
            .and_then(|d| d.write_raw(data))
            .map_err(e)?;
    }
    Ok(())
}

/// Read a packed file.
pub fn read_packed(path: &Path) -> Result<(TwoPointData, ThreePointData)> {
    let (f, len) = open_file(path)?;
    let index: Index = {
        let raw = read_exact::<u8>(&f, path, len, "formfactory", None)?;
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
    let configs = read_exact::<i64>(&f, path, len, "configs", None)?;
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

/// Read `group/re` and `group/im` of shape `[n, n_t, n_cfg]` into `n` series.
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
    let re = read_exact::<f64>(f, path, len, &format!("{group}/re"), Some(&shape))?;
    let im = read_exact::<f64>(f, path, len, &format!("{group}/im"), Some(&shape))?;
    let size = n_t * n_cfg;
    let mut out = Vec::with_capacity(n);
    for c in 0..n {
        let s = Series {
            n_cfg,
            n_t,
            re: re[c * size..(c + 1) * size].to_vec(),
            im: im[c * size..(c + 1) * size].to_vec(),
        };
        if let Some(i) = (0..size).find(|&i| !s.re[i].is_finite() || !s.im[i].is_finite()) {
            return Err(dataset_error(
                path,
                &format!("{group}/re"),
                format!(
                    "non-finite value at channel {c}, time {}, configuration index {}",
                    i / n_cfg,
                    i % n_cfg
                ),
            ));
        }
        out.push(s);
    }
    Ok(out)
}

/// Read a whole dataset of element type `T` (the stored type must be exactly `T`'s class
/// and size), with its shape checked against `shape` (when given) and the file size first.
fn read_exact<T: hdf5::H5Type>(
    f: &hdf5::File,
    path: &Path,
    len: u64,
    name: &str,
    shape: Option<&[usize]>,
) -> Result<Vec<T>> {
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
    ds.read_raw::<T>()
        .map_err(|e| err(format!("cannot read: {e}")))
}

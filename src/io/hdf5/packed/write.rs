//! Writing the packed file: the index, the configurations and one `[channel, time, config]`
//! block per table (per `tsep` for the three-point table), atomically.

use super::{Index, FORMAT, VERSION};
use crate::data::{Series, ThreePointData, TwoPointData};
use crate::error::{Error, Result};
use std::collections::BTreeMap;
use std::path::Path;

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

//! HDF5 input: correlators where contraction codes write them, and the packed ensemble file.
//!
//! Why it exists: contraction codes write HDF5 (usually one file per configuration, one
//! dataset per momentum / current / projector / tsep), and at production size parsing text
//! dominates a run. The pipeline's `data.hdf5` section describes the layout with path
//! templates ([`template`], [`mapping`]); the reader fills the same data model as the CSV
//! reader with the same rules. `formfactory pack` gathers an ensemble once into one packed
//! file ([`write_packed`]) that later runs read at disk speed.
//!
//! The library is optional (cargo feature `hdf5`, or `hdf5-static` for a self-contained
//! build). Without it the mapping is still parsed and checked, and reading says how to
//! enable the feature.

pub mod mapping;
pub mod template;

#[cfg(feature = "hdf5")]
mod collect;
#[cfg(feature = "hdf5")]
mod dataset;
#[cfg(feature = "hdf5")]
mod fast;
#[cfg(feature = "hdf5")]
mod files;
#[cfg(feature = "hdf5")]
mod open;
#[cfg(feature = "hdf5")]
mod packed;
#[cfg(feature = "hdf5")]
mod raw;
#[cfg(feature = "hdf5")]
mod walk;

pub use mapping::{Hdf5Source, Layout, Mapping};

use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use std::path::Path;

/// Whether this build can read and write HDF5.
pub const ENABLED: bool = cfg!(feature = "hdf5");

/// The error of a build without HDF5 support, saying how to get it.
pub fn not_enabled(what: &str) -> Error {
    Error::config(format!(
        "{what} needs HDF5 support, which this build of formfactory does not have; rebuild with \
         `cargo build --release --features hdf5` (links the system library: on Debian or Ubuntu \
         `apt-get install libhdf5-dev pkg-config`) or `--features hdf5-static` (builds the \
         library into the binary; needs cmake >= 3.26, e.g. `pip install cmake`)"
    ))
}

/// Whether the file at `path` starts with the HDF5 signature (checked without the library).
/// Only a regular file is opened: a FIFO or a device is no HDF5 file, and opening a FIFO
/// would wait forever; the caller's own open then refuses it with its message.
pub fn looks_like_hdf5(path: &Path) -> bool {
    use std::io::Read;
    let mut sig = [0u8; 8];
    crate::io::open_regular(path).is_ok_and(|mut f| f.read_exact(&mut sig).is_ok())
        && &sig == b"\x89HDF\r\n\x1a\n"
}

/// Read the correlators of a source: a packed file, or the files a mapping describes.
/// `t_extent` (the ensemble's `T`) cuts longer two-point time axes; `progress` is called with
/// (files done, files in all). Returns the data and notes for the run log.
pub fn read_source(
    m: &Mapping,
    t_extent: Option<usize>,
    progress: &dyn Fn(usize, usize),
) -> Result<(TwoPointData, ThreePointData, Vec<String>)> {
    #[cfg(feature = "hdf5")]
    {
        if let Layout::Packed(p) = &m.layout {
            let (two, three) = packed::read_packed(p)?;
            let two = cut_time(two, t_extent, p)?;
            let note = format!(
                "{}: read the packed file: {} two-point and {} three-point channels on {} configurations",
                p.display(),
                two.channels.len(),
                three.channels.len(),
                two.configs.len()
            );
            progress(1, 1);
            return Ok((two, three, vec![note]));
        }
        let c = collect::read_mapped(m, t_extent, progress)?;
        Ok((c.twopt, c.threept, c.notes))
    }
    #[cfg(not(feature = "hdf5"))]
    {
        let _ = (m, t_extent, progress);
        Err(not_enabled("the data source `data.hdf5`"))
    }
}

/// Keep the first `t_extent` time slices of every two-point channel of a packed file.
pub(crate) fn cut_time(
    mut two: TwoPointData,
    t_extent: Option<usize>,
    path: &Path,
) -> Result<TwoPointData> {
    let Some(t) = t_extent else { return Ok(two) };
    for (k, s) in two.channels.iter_mut() {
        if s.n_t < t {
            return Err(Error::Table {
                path: path.to_path_buf(),
                message: format!(
                    "two-point {} has {} time slices; the ensemble's T = {t} needs that many",
                    crate::io::describe_twopt(k),
                    s.n_t
                ),
            });
        }
        if s.n_t > t {
            s.n_t = t;
            s.re.truncate(t * s.n_cfg);
            s.im.truncate(t * s.n_cfg);
        }
    }
    Ok(two)
}

/// Move a finished temporary file into place with the usual permissions (`tempfile` creates
/// files readable by their owner only).
pub fn persist(tmp: tempfile::NamedTempFile, target: &Path) -> Result<()> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(tmp.path(), std::fs::Permissions::from_mode(0o644))
            .map_err(|e| Error::io(tmp.path(), e))?;
    }
    tmp.persist(target)
        .map_err(|e| Error::io(target, e.error))?;
    Ok(())
}

/// Read a packed file written by [`write_packed`].
pub fn read_packed(path: &Path) -> Result<(TwoPointData, ThreePointData)> {
    #[cfg(feature = "hdf5")]
    {
        packed::read_packed(path)
    }
    #[cfg(not(feature = "hdf5"))]
    {
        let _ = path;
        Err(not_enabled("reading a packed HDF5 file"))
    }
}

/// What a walk over a packed file sees, in file order: the configurations once, then every
/// two-point channel, then the three-point channels block by block (`tsep` ascending).
pub trait PackedVisitor {
    /// The file's configurations (checked: at least one, strictly ascending).
    fn configs(&mut self, configs: &[i64]) -> Result<()>;
    /// One two-point channel (values checked finite). The series is the walk's buffer: taking
    /// its vectors leaves the walk to allocate fresh ones for the next channel.
    fn twopt(&mut self, key: TwoPointKey, series: &mut Series) -> Result<()>;
    /// One three-point channel, as [`PackedVisitor::twopt`].
    fn threept(&mut self, key: ThreePointKey, series: &mut Series) -> Result<()>;
}

/// Walk a packed file written by [`write_packed`] channel by channel, holding one channel's
/// values at a time (see [`PackedVisitor`]); checks and errors are those of [`read_packed`].
pub fn visit_packed(path: &Path, visitor: &mut dyn PackedVisitor) -> Result<()> {
    #[cfg(feature = "hdf5")]
    {
        packed::visit_packed(path, visitor)
    }
    #[cfg(not(feature = "hdf5"))]
    {
        let _ = (path, visitor);
        Err(not_enabled("reading a packed HDF5 file"))
    }
}

/// Write a packed ensemble file (atomically).
pub fn write_packed(out: &Path, two: &TwoPointData, three: &ThreePointData) -> Result<()> {
    #[cfg(feature = "hdf5")]
    {
        packed::write_packed(out, two, three)
    }
    #[cfg(not(feature = "hdf5"))]
    {
        let _ = (out, two, three);
        Err(not_enabled("writing a packed HDF5 file"))
    }
}

//! Reading one correlator dataset safely: the type, rank and shape are checked against what
//! the mapping expects and against the size of the file before anything is allocated, so a
//! damaged or foreign file gives an error, never a huge allocation, a panic or an abort.
//!
//! Complex values are either a trailing axis of length 2 (real, imaginary) or a compound type
//! with two floating-point fields whose names are one of the accepted spellings. Double
//! precision is read as is; single precision is read as `f32` and widened explicitly; integer
//! data are refused (the library would convert them silently).

use crate::error::{Error, Result};
use hdf5::types::{FloatSize, TypeDescriptor};
use hdf5::H5Type;
use std::path::Path;

/// The accepted spellings of the two fields of a compound complex number.
pub const COMPLEX_FIELDS: &[(&str, &str)] = &[
    ("re", "im"),
    ("r", "i"),
    ("real", "imag"),
    ("real", "imaginary"),
    ("Re", "Im"),
    ("Real", "Imag"),
];

/// Deflate can shrink data at most about 1032-fold; a compressed dataset claiming more
/// elements than this many times the file size is damaged.
const MAX_COMPRESSION: u64 = 1100;

/// A block of complex values, rows (configurations of a dataset with a configuration axis,
/// else one) by `n_t`, row-major (`[row * n_t + t]`).
pub struct Block {
    /// Time slices kept.
    pub n_t: usize,
    /// Real parts.
    pub re: Vec<f64>,
    /// Imaginary parts.
    pub im: Vec<f64>,
}

/// An error about dataset `name` of `file`.
pub fn dataset_error(file: &Path, name: &str, message: impl std::fmt::Display) -> Error {
    Error::Table {
        path: file.to_path_buf(),
        message: format!("dataset `{name}`: {message}"),
    }
}

macro_rules! complex_types {
    ($( $name:ident, $t:ty, $re:literal, $im:literal; )*) => {
        $(
            #[derive(H5Type, Clone, Copy)]
            #[repr(C)]
            struct $name {
                #[hdf5(rename = $re)]
                re: $t,
                #[hdf5(rename = $im)]
                im: $t,
            }
        )*
        /// The memory type of a compound `(re, im)` of floats (`f32` when `single`): the
        /// two fields in this order, so a value reads as two consecutive floats.
        fn compound_mem_type(re: &str, im: &str, single: bool) -> hdf5::Result<hdf5::Datatype> {
            $(
                if re == $re && im == $im && single == (std::mem::size_of::<$t>() == 4) {
                    return hdf5::Datatype::from_type::<$name>();
                }
            )*
            Err(hdf5::Error::from("no compound type for these field names"))
        }
    };
}

complex_types! {
    ReIm64, f64, "re", "im"; ReIm32, f32, "re", "im";
    RI64, f64, "r", "i"; RI32, f32, "r", "i";
    RealImag64, f64, "real", "imag"; RealImag32, f32, "real", "imag";
    RealImaginary64, f64, "real", "imaginary"; RealImaginary32, f32, "real", "imaginary";
    CapReIm64, f64, "Re", "Im"; CapReIm32, f32, "Re", "Im";
    CapRealImag64, f64, "Real", "Imag"; CapRealImag32, f32, "Real", "Imag";
}

/// How the complex values of a dataset are stored.
#[derive(Clone, Copy)]
pub enum Storage {
    /// Float array with a trailing axis of length 2.
    Pairs { single: bool },
    /// Compound with two float fields (real name, imaginary name).
    Compound {
        re: &'static str,
        im: &'static str,
        single: bool,
    },
}

impl Storage {
    /// Whether the values are single precision.
    pub fn single(self) -> bool {
        match self {
            Storage::Pairs { single } | Storage::Compound { single, .. } => single,
        }
    }
}

fn float_single(t: &TypeDescriptor) -> Option<bool> {
    match t {
        TypeDescriptor::Float(FloatSize::U4) => Some(true),
        TypeDescriptor::Float(FloatSize::U8) => Some(false),
        _ => None,
    }
}

fn storage_of(t: &TypeDescriptor) -> std::result::Result<Storage, String> {
    match t {
        TypeDescriptor::Float(_) => match float_single(t) {
            Some(single) => Ok(Storage::Pairs { single }),
            None => Err(format!("unsupported floating-point type {t}")),
        },
        TypeDescriptor::Integer(_) | TypeDescriptor::Unsigned(_) | TypeDescriptor::Boolean => {
            Err(format!(
                "holds integer data ({t}); correlators must be floating point (f32 or f64)"
            ))
        }
        TypeDescriptor::Compound(c) => {
            // The bindings take field names from the file without checking that they are
            // UTF-8; a damaged name is shown with replacement characters (formatting the raw
            // name could panic).
            let names: Vec<String> = c
                .fields
                .iter()
                .map(|f| String::from_utf8_lossy(f.name.as_bytes()).into_owned())
                .collect();
            // A field that reaches past the end of its compound value would make the library
            // read outside each value: refuse it before any read (libhdf5 1.10 does not check).
            if let Some((f, name)) = c.fields.iter().zip(&names).find(|(f, _)| {
                f.offset
                    .checked_add(f.ty.size())
                    .is_none_or(|end| end > c.size)
            }) {
                return Err(format!(
                    "compound type of {} bytes has field {name:?} of {} bytes at offset {}, past \
                     its end: the file is damaged",
                    c.size,
                    f.ty.size(),
                    f.offset
                ));
            }
            let spellings = || {
                COMPLEX_FIELDS
                    .iter()
                    .map(|(r, i)| format!("{{{r}, {i}}}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            };
            let pair = (c.fields.len() == 2)
                .then(|| {
                    COMPLEX_FIELDS.iter().find(|(r, i)| {
                        (names[0] == *r && names[1] == *i) || (names[0] == *i && names[1] == *r)
                    })
                })
                .flatten();
            let Some((re, im)) = pair else {
                return Err(format!(
                    "compound type with fields {names:?} is not a complex number; accepted field names: {}",
                    spellings()
                ));
            };
            let types: Vec<Option<bool>> = c.fields.iter().map(|f| float_single(&f.ty)).collect();
            match (types[0], types[1]) {
                (Some(a), Some(b)) if a == b => Ok(Storage::Compound { re, im, single: a }),
                _ => Err(format!(
                    "compound fields {names:?} must both be f32 or both f64, found {} and {}",
                    c.fields[0].ty, c.fields[1].ty
                )),
            }
        }
        other => Err(format!(
            "has type {other}; expected complex numbers (floats with a trailing axis of 2, or a compound {{re, im}})"
        )),
    }
}

/// The file types of the datasets read recently, what each was found to hold and the memory
/// type it is read as. Correlator files repeat a few types for thousands of datasets:
/// comparing a dataset's type with these (`H5Tequal`) costs far less than describing the type
/// and building the memory type again for every dataset.
#[derive(Default)]
pub struct TypeCache {
    /// Most recently used last; at most [`TypeCache::MAX`] entries.
    known: Vec<KnownType>,
}

/// A file type seen before.
pub struct KnownType {
    /// The file type.
    pub file: hdf5::Datatype,
    /// How it stores complex numbers.
    pub storage: Storage,
    /// The memory type the values are read as.
    pub mem: hdf5::Datatype,
    /// Its size in bytes.
    pub mem_size: usize,
    /// The size of one element of the file type in bytes.
    pub elem: usize,
    /// Whether the file type equals the memory type (`H5Tequal`): the library would copy the
    /// stored bytes unchanged, so they may be taken straight from the file's bytes.
    pub exact: bool,
}

impl TypeCache {
    /// Types kept.
    const MAX: usize = 8;

    /// The storage and memory type of `dtype`, described only when it differs from the
    /// types seen before.
    fn get(&mut self, dtype: hdf5::Datatype) -> std::result::Result<&KnownType, TypeError> {
        let found = self.known.iter().rposition(|known| known.file == dtype);
        let index = match found {
            Some(i) => i,
            None => {
                let desc = dtype.to_descriptor().map_err(TypeError::Library)?;
                let storage = storage_of(&desc).map_err(TypeError::Refused)?;
                let mem = match storage {
                    Storage::Pairs { single: false } => hdf5::Datatype::from_type::<f64>(),
                    Storage::Pairs { single: true } => hdf5::Datatype::from_type::<f32>(),
                    Storage::Compound { re, im, single } => compound_mem_type(re, im, single),
                }
                .map_err(TypeError::Library)?;
                if self.known.len() == Self::MAX {
                    self.known.remove(0);
                }
                self.known.push(KnownType {
                    mem_size: mem.size(),
                    elem: dtype.size(),
                    exact: mem == dtype,
                    file: dtype,
                    storage,
                    mem,
                });
                self.known.len() - 1
            }
        };
        self.known
            .get(index)
            .ok_or_else(|| TypeError::Refused("no type".into()))
    }

    /// The known type equal to the library's datatype `id` (`H5Tequal`), if any; the caller
    /// holds the library lock.
    pub fn find_raw(&self, id: hdf5_sys::h5i::hid_t) -> Option<&KnownType> {
        // SAFETY: `id` is a datatype identifier the caller holds open, and `known.file` is an
        // open datatype; H5Tequal only reads both (a negative result, an error, is "no").
        self.known
            .iter()
            .rev()
            .find(|known| unsafe { hdf5_sys::h5t::H5Tequal(known.file.id(), id) } > 0)
    }
}

enum TypeError {
    Library(hdf5::Error),
    Refused(String),
}

/// Read dataset `name` of `file` (size `file_len`) as complex numbers with `n_need` time
/// slices kept (the time axis may be longer; it is cut). With `config_axis`, the first axis
/// holds `rows` configurations.
pub fn read_block(
    file: &hdf5::File,
    path: &Path,
    file_len: u64,
    name: &str,
    config_axis: Option<usize>,
    n_need: Option<usize>,
    types: &mut TypeCache,
) -> Result<Block> {
    let err = |m: String| dataset_error(path, name, m);
    let h5 = |e: hdf5::Error| dataset_error(path, name, format!("cannot read: {e}"));
    let ds = file.dataset(name).map_err(h5)?;
    let known = types.get(ds.dtype().map_err(h5)?).map_err(|e| match e {
        TypeError::Library(e) => h5(e),
        TypeError::Refused(m) => err(m),
    })?;
    let storage = known.storage;
    let shape = ds.shape();
    let (rows, n_t) = block_shape(&shape, &storage, config_axis).map_err(err)?;
    check_size(&ds, known.elem as u64, &shape, file_len).map_err(err)?;
    let keep = n_need.unwrap_or(n_t);
    if n_t < keep {
        return Err(err(format!("has {n_t} time slices; {keep} are needed")));
    }
    let values = read_values(&ds, storage, &known.mem, 2 * rows * n_t).map_err(h5)?;
    finite_block(&values, rows, n_t, keep, config_axis.is_some()).map_err(err)
}

/// Check the dataset's axes against the layout (`(time[, 2])` per configuration, or
/// `(configuration, time[, 2])` with `config_axis`); returns (rows, time slices).
pub fn block_shape(
    shape: &[usize],
    storage: &Storage,
    config_axis: Option<usize>,
) -> std::result::Result<(usize, usize), String> {
    let lead = usize::from(config_axis.is_some());
    let pairs = matches!(storage, Storage::Pairs { .. });
    let rank = 1 + lead + usize::from(pairs);
    let axes = match (config_axis.is_some(), pairs) {
        (false, true) => "(time, 2)",
        (false, false) => "(time)",
        (true, true) => "(configuration, time, 2)",
        (true, false) => "(configuration, time)",
    };
    if shape.len() != rank {
        return Err(format!("has shape {shape:?}; expected {rank} axes {axes}"));
    }
    if pairs && shape[rank - 1] != 2 {
        return Err(format!(
            "has shape {shape:?}; the last axis must have length 2 (real, imaginary)"
        ));
    }
    let rows = if lead == 1 { shape[0] } else { 1 };
    if let Some(n) = config_axis {
        if rows != n {
            return Err(format!(
                "has {rows} configurations along its first axis; the configuration list has {n}"
            ));
        }
    }
    Ok((rows, shape[lead]))
}

/// The shape and chunk shape against the file size, before anything is allocated (a
/// compressed dataset may hold up to `MAX_COMPRESSION` times the file size).
fn check_size(
    ds: &hdf5::Dataset,
    elem: u64,
    shape: &[usize],
    file_len: u64,
) -> std::result::Result<(), String> {
    let count = shape
        .iter()
        .try_fold(1u64, |acc, &d| acc.checked_mul(d as u64))
        .ok_or_else(|| format!("has an impossible shape {shape:?}"))?;
    let bytes = count
        .checked_mul(elem)
        .ok_or_else(|| format!("has an impossible shape {shape:?}"))?;
    // A dataset with a file offset is contiguous and stored in this file (filters and
    // chunks need the chunked layout), so its bytes must fit after that offset; that spares
    // the copy of the creation property list that the other layouts need.
    if let Some(offset) = ds.offset() {
        if bytes > file_len.saturating_sub(offset) {
            return Err(format!(
                "claims {bytes} bytes of data ({shape:?} of {elem}-byte values) at offset {offset} in a file of {file_len} bytes: the file is damaged or truncated"
            ));
        }
        return Ok(());
    }
    let dcpl = ds
        .dcpl()
        .map_err(|e| format!("cannot read its storage properties: {e}"))?;
    let limit = if dcpl.filters().is_empty() {
        file_len
    } else {
        file_len.saturating_mul(MAX_COMPRESSION)
    };
    if bytes > limit {
        return Err(format!(
            "claims {bytes} bytes of data ({shape:?} of {elem}-byte values) in a file of {file_len} bytes: the file is damaged or truncated"
        ));
    }
    if let Some(chunk) = dcpl.chunk() {
        let chunk_bytes = chunk
            .iter()
            .try_fold(elem, |acc, &d| acc.checked_mul(d as u64));
        if chunk_bytes.is_none_or(|b| b > limit.max(1 << 20)) {
            return Err(format!(
                "has an impossible chunk shape {chunk:?}: the file is damaged"
            ));
        }
    }
    Ok(())
}

/// All values of the dataset, `floats` of them (real and imaginary parts interleaved),
/// widened to `f64`. `mem` is the memory type of `storage` (two floats per value).
fn read_values(
    ds: &hdf5::Dataset,
    storage: Storage,
    mem: &hdf5::Datatype,
    floats: usize,
) -> hdf5::Result<Vec<f64>> {
    if storage.single() {
        Ok(read_all::<f32>(ds, mem, floats)?
            .into_iter()
            .map(f64::from)
            .collect())
    } else {
        read_all::<f64>(ds, mem, floats)
    }
}

/// The whole dataset read as memory type `mem` into `floats` values of `T` (one library
/// call: the crate's `read_raw` builds the memory type and a transfer property list for every
/// read, which costs more than the read of a small dataset).
fn read_all<T: Copy + Default>(
    ds: &hdf5::Dataset,
    mem: &hdf5::Datatype,
    floats: usize,
) -> hdf5::Result<Vec<T>> {
    use hdf5_sys::{h5d::H5Dread, h5p::H5P_DEFAULT, h5s::H5S_ALL};
    if mem.size() != 2 * std::mem::size_of::<T>() && mem.size() != std::mem::size_of::<T>() {
        return Err(hdf5::Error::from("memory type does not match the buffer"));
    }
    let mut buf = vec![T::default(); floats];
    // SAFETY: `buf` holds `floats` values of `T`, which is what the whole dataset takes in
    // memory type `mem`: the caller checked the shape (`2 * rows * n_t` floats, the trailing
    // axis of 2 or two fields per compound value) and `mem` is one `T` or a pair of them.
    hdf5::sync::sync(|| {
        hdf5::h5check(unsafe {
            H5Dread(
                ds.id(),
                mem.id(),
                H5S_ALL,
                H5S_ALL,
                H5P_DEFAULT,
                buf.as_mut_ptr().cast(),
            )
        })
    })?;
    Ok(buf)
}

/// The first `keep` of `n_t` time slices of each of `rows` rows of interleaved real and
/// imaginary parts, refusing non-finite values.
fn finite_block(
    values: &[f64],
    rows: usize,
    n_t: usize,
    keep: usize,
    config_axis: bool,
) -> std::result::Result<Block, String> {
    let mut block = Block {
        n_t: keep,
        re: Vec::with_capacity(rows * keep),
        im: Vec::with_capacity(rows * keep),
    };
    for r in 0..rows {
        for t in 0..keep {
            let (re, im) = (values[2 * (r * n_t + t)], values[2 * (r * n_t + t) + 1]);
            if !re.is_finite() || !im.is_finite() {
                let at = if config_axis {
                    format!("configuration index {r}, time {t}")
                } else {
                    format!("time {t}")
                };
                return Err(format!(
                    "non-finite value ({re}, {im}) at {at}; only finite numbers are allowed"
                ));
            }
            block.re.push(re);
            block.im.push(im);
        }
    }
    Ok(block)
}

//! The library calls of the fast walk (`fast.rs`), through `hdf5-sys` because the crate's
//! safe API cannot do them: a group's links with their object addresses (`H5Literate`), a
//! dataset's type, shape and offset without the crate's per-handle checks and locks, and the
//! values taken from the file's bytes or read with one `H5Dread` into a reused buffer. Every
//! call's status is checked; any failure makes the fast walk decline. The caller holds the
//! library lock (`hdf5::sync::sync`) for the whole file.

use super::dataset::{block_shape, KnownType, TypeCache};
use hdf5_sys::h5::{haddr_t, herr_t, hsize_t, H5_index_t, H5_iter_order_t, HADDR_UNDEF};
use hdf5_sys::h5i::hid_t;
use std::ffi::{c_char, c_void, CStr};

/// How the datasets of a finished fast walk were read (for tests and measurements).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Counts {
    /// Files read into memory and opened from there.
    pub in_memory: usize,
    /// Datasets whose values were taken from the file's bytes.
    pub copied: usize,
    /// Datasets read with one library read (a type the library converts, or a large file).
    pub library: usize,
    /// Datasets read by the per-dataset reader of `dataset.rs` (a type not seen before,
    /// chunked or compact storage).
    pub per_dataset: usize,
}

/// The fast walk leaves the files to the exact walk (see the module documentation).
pub(super) struct Declined;

pub(super) type Step<T> = std::result::Result<T, Declined>;

/// Where a file's datasets are stored and how their rows are laid out.
pub(super) struct Stored<'a> {
    /// The file's size in bytes.
    pub len: u64,
    /// The configuration axis length, for a file holding every configuration.
    pub axis: Option<usize>,
    /// The file's bytes, when it is held in memory.
    pub image: Option<&'a [u8]>,
}

/// A dataset's checked shape.
struct Shape {
    rows: usize,
    n_t: usize,
    keep: usize,
    /// Floats in memory (real and imaginary parts).
    floats: usize,
    /// Byte offset of the contiguous values in the file.
    offset: u64,
}

/// Read dataset `id` into `values` (real and imaginary parts interleaved, rows x `n_t`) with
/// the checks of `dataset::read_block`; returns `(n_t, time slices kept)`, or `None` when the
/// per-dataset reader must read it (a type not in `types`, storage without a file offset).
#[allow(clippy::too_many_arguments)]
pub(super) fn read_raw(
    types: &TypeCache,
    stored: &Stored,
    id: hid_t,
    need: Option<usize>,
    values: &mut Vec<f64>,
    singles: &mut Vec<f32>,
    counts: &mut Counts,
) -> Step<Option<(usize, usize)>> {
    // SAFETY: `id` is a dataset the walk holds open; the type is closed by its guard.
    let dtype = Id::new(unsafe { hdf5_sys::h5d::H5Dget_type(id) }, Id::TYPE)?;
    let Some(known) = types.find_raw(dtype.id) else {
        return Ok(None);
    };
    let Some(shape) = checked_shape(known, stored, id, need)? else {
        return Ok(None);
    };
    read_values(known, stored, id, &shape, values, singles, counts)?;
    for r in 0..shape.rows {
        let row = &values[2 * r * shape.n_t..2 * (r * shape.n_t + shape.keep)];
        if !row.iter().all(|x| x.is_finite()) {
            return Err(Declined);
        }
    }
    Ok(Some((shape.n_t, shape.keep)))
}

/// The shape of dataset `id` (of type `known`) checked as `dataset::read_block` checks it:
/// axes against the layout, bytes against the file after the dataset's offset, enough time
/// slices; `None` for a dataset without a file offset (chunked, compact, not allocated).
fn checked_shape(
    known: &KnownType,
    stored: &Stored,
    id: hid_t,
    need: Option<usize>,
) -> Step<Option<Shape>> {
    use hdf5_sys::{h5d, h5s};
    // SAFETY (every call below): `id` is a dataset the walk holds open; the space is closed
    // by its guard; `dims` holds 32 values, at least `rank`.
    let space = Id::new(unsafe { h5d::H5Dget_space(id) }, Id::SPACE)?;
    let rank = unsafe { h5s::H5Sget_simple_extent_ndims(space.id) };
    let rank = usize::try_from(rank).map_err(|_| Declined)?;
    let mut dims: [hsize_t; 32] = [0; 32];
    if rank > dims.len() {
        return Err(Declined);
    }
    if rank > 0
        && unsafe {
            h5s::H5Sget_simple_extent_dims(space.id, dims.as_mut_ptr(), std::ptr::null_mut())
        } < 0
    {
        return Err(Declined);
    }
    let mut shape = [0usize; 32];
    for (s, &d) in shape.iter_mut().zip(&dims[..rank]) {
        *s = usize::try_from(d).map_err(|_| Declined)?;
    }
    let shape = &shape[..rank];
    let (rows, n_t) = block_shape(shape, &known.storage, stored.axis).map_err(|_| Declined)?;
    // The size against the file, as `dataset::check_size` does for a dataset with an offset.
    let bytes = shape
        .iter()
        .try_fold(known.elem as u64, |acc, &d| acc.checked_mul(d as u64))
        .ok_or(Declined)?;
    let offset: haddr_t = unsafe { h5d::H5Dget_offset(id) };
    if offset == HADDR_UNDEF {
        return Ok(None);
    }
    if bytes > stored.len.saturating_sub(offset) {
        return Err(Declined);
    }
    let keep = need.unwrap_or(n_t);
    if n_t < keep {
        return Err(Declined);
    }
    let width: usize = if known.storage.single() { 4 } else { 8 };
    let floats = 2 * rows * n_t;
    let mem = known.mem_size;
    if bytes != (floats * width) as u64 || (mem != width && mem != 2 * width) {
        return Err(Declined);
    }
    Ok(Some(Shape {
        rows,
        n_t,
        keep,
        floats,
        offset,
    }))
}

/// The values of dataset `id` into `values`: taken from the file's bytes when the library
/// would copy them unchanged (file type = memory type, file in memory), else one library
/// read into a reused buffer.
fn read_values(
    known: &KnownType,
    stored: &Stored,
    id: hid_t,
    shape: &Shape,
    values: &mut Vec<f64>,
    singles: &mut Vec<f32>,
    counts: &mut Counts,
) -> Step<()> {
    let single = known.storage.single();
    let width: usize = if single { 4 } else { 8 };
    let floats = shape.floats;
    values.clear();
    if let Some(image) = stored.image.filter(|_| known.exact) {
        let start = usize::try_from(shape.offset).map_err(|_| Declined)?;
        let raw = image
            .get(start..start.saturating_add(floats * width))
            .ok_or(Declined)?;
        if single {
            values.extend(raw.chunks_exact(4).map(|b| {
                let mut a = [0u8; 4];
                a.copy_from_slice(b);
                f64::from(f32::from_ne_bytes(a))
            }));
        } else {
            values.extend(raw.chunks_exact(8).map(|b| {
                let mut a = [0u8; 8];
                a.copy_from_slice(b);
                f64::from_ne_bytes(a)
            }));
        }
        counts.copied += 1;
        return Ok(());
    }
    use hdf5_sys::{h5d::H5Dread, h5p::H5P_DEFAULT, h5s::H5S_ALL};
    // SAFETY: `id` is open; `values` / `singles` hold `floats` values: the whole dataset in
    // the memory type (one float, or a pair of them per element), checked by the caller.
    let status = if single {
        singles.clear();
        singles.resize(floats, 0.0);
        let buf = singles.as_mut_ptr().cast();
        let s = unsafe { H5Dread(id, known.mem.id(), H5S_ALL, H5S_ALL, H5P_DEFAULT, buf) };
        values.extend(singles.iter().map(|&x| f64::from(x)));
        s
    } else {
        values.resize(floats, 0.0);
        let buf = values.as_mut_ptr().cast();
        unsafe { H5Dread(id, known.mem.id(), H5S_ALL, H5S_ALL, H5P_DEFAULT, buf) }
    };
    if status < 0 {
        return Err(Declined);
    }
    counts.library += 1;
    Ok(())
}

/// An identifier the walk opened, closed when dropped.
pub(super) struct Id {
    pub(super) id: hid_t,
    close: unsafe extern "C" fn(hid_t) -> herr_t,
}

impl Id {
    pub(super) const OBJECT: unsafe extern "C" fn(hid_t) -> herr_t = hdf5_sys::h5o::H5Oclose;
    const TYPE: unsafe extern "C" fn(hid_t) -> herr_t = hdf5_sys::h5t::H5Tclose;
    const SPACE: unsafe extern "C" fn(hid_t) -> herr_t = hdf5_sys::h5s::H5Sclose;

    /// Take ownership of `id`, the result of an open; a negative one is a failed open.
    pub(super) fn new(id: hid_t, close: unsafe extern "C" fn(hid_t) -> herr_t) -> Step<Id> {
        if id < 0 {
            Err(Declined)
        } else {
            Ok(Id { id, close })
        }
    }
}

impl Drop for Id {
    fn drop(&mut self) {
        // SAFETY: the identifier is open and owned here. A close of an identifier the walk
        // opened read-only has nothing to flush; its status leaves nothing to act on.
        let _status = unsafe { (self.close)(self.id) };
    }
}

/// The links of one group, in the library's name order.
#[derive(Default)]
pub(super) struct Links {
    names: String,
    pub(super) items: Vec<Link>,
}

pub(super) struct Link {
    start: usize,
    end: usize,
    /// The object header address of a hard link.
    pub(super) addr: Option<haddr_t>,
}

impl Links {
    /// List the links of `group` (one `H5Literate` by name, the order of the exact walk).
    pub(super) fn of(group: hid_t) -> Step<Links> {
        let mut links = Links::default();
        // SAFETY: `group` is open; the callback only appends to `links`, passed as its data
        // pointer and alive for the whole call.
        #[allow(deprecated)] // deprecated from 1.12, where it stays the address-based form
        let status = unsafe {
            hdf5_sys::h5l::H5Literate1(
                group,
                H5_index_t::H5_INDEX_NAME,
                H5_iter_order_t::H5_ITER_NATIVE,
                std::ptr::null_mut(),
                Some(collect_link),
                (&mut links as *mut Links).cast(),
            )
        };
        if status < 0 {
            return Err(Declined);
        }
        Ok(links)
    }

    pub(super) fn name(&self, link: &Link) -> &str {
        self.names.get(link.start..link.end).unwrap_or_default()
    }
}

/// `H5Literate` callback: append the link's name and, for a hard link, its address. A name
/// that is not UTF-8 stops the iteration (the walk declines).
unsafe extern "C" fn collect_link(
    _group: hid_t,
    name: *const c_char,
    info: *const hdf5_sys::h5l::H5L_info1_t,
    data: *mut c_void,
) -> herr_t {
    if name.is_null() || info.is_null() || data.is_null() {
        return -1;
    }
    // SAFETY: the library passes a NUL-terminated name, the link's info and the data
    // pointer given to `H5Literate1` (a `Links` borrowed mutably for the call).
    let (name, mut info, links) =
        unsafe { (CStr::from_ptr(name), *info, &mut *data.cast::<Links>()) };
    let Ok(name) = name.to_str() else {
        return -1;
    };
    let addr = (info.type_ == hdf5_sys::h5l::H5L_type_t::H5L_TYPE_HARD)
        // SAFETY: the union holds the address for a hard link.
        .then(|| unsafe { *info.u.address() });
    let start = links.names.len();
    links.names.push_str(name);
    links.items.push(Link {
        start,
        end: links.names.len(),
        addr,
    });
    0
}

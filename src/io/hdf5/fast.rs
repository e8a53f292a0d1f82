//! The fast walk over the files of a mapping: what `formfactory pack` (and every run from
//! per-configuration files) spends its time in, at less cost per dataset than libhdf5's own
//! minimum of opening each dataset by name and reading it (`benches/hdf5_minimum.c`).
//!
//! Why it exists: at production size there are millions of small datasets and the cost is
//! per dataset, not per byte. Per file it reads the bytes once into a reused buffer and lets
//! the library open an in-memory copy (the core driver: no system call per object header),
//! with each object's metadata evicted from the library's cache when the object is closed
//! (each is read once; a small cache is cheaper to use, and the file's close has nothing left
//! to tear down);
//! it lists each group's links once (`H5Literate`) and opens each object by the address its
//! link holds (`H5Oopen_by_addr`: no name lookup, and the object's kind comes with the open
//! instead of a query per name); a dataset's type is compared with the types seen before
//! (`H5Tequal`), its shape and size checked as in `dataset.rs`, and when its file type equals
//! the memory type (no conversion) and it is stored contiguously, its values are taken from
//! the file's bytes at the offset the library reports instead of a library read; the values
//! go straight into their channel from one reused buffer. Template matches are kept per
//! dataset path, so files after the first match nothing again.
//!
//! It is exact or it declines: a new type, chunked or compact storage go through the
//! per-dataset reader of `dataset.rs` (on the same open file); a soft or external link, a
//! name that is not UTF-8, a nesting deeper than the walk in `files.rs` allows, and every
//! error make it decline, and the caller (`collect::read_with`) reads the files again with
//! its own walk, which gives the data, notes and error messages it always gave. So where this
//! walk finishes, the result is the one that walk would have given, bit for bit (both add
//! the values in the same order through `Acc::add_with`).

use super::collect::{describe_three, describe_two, Kind, Walk};
use super::dataset::{block_shape, has_signature, read_block, TypeCache};
use super::files::MAX_DEPTH;
use super::template::Captures;
use hdf5_sys::h5::{haddr_t, herr_t, hsize_t, H5_index_t, H5_iter_order_t, HADDR_UNDEF};
use hdf5_sys::h5i::{hid_t, H5I_type_t};
use std::collections::HashMap;
use std::ffi::{c_char, c_void, CStr};
use std::path::{Path, PathBuf};

/// Files up to this size are read into memory once and opened from there; larger ones (one
/// file holding a whole ensemble) are opened from disk and read with one library read per
/// dataset.
const IN_MEMORY_LIMIT: u64 = 256 << 20;

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
struct Declined;

type Step<T> = std::result::Result<T, Declined>;

/// Walk every file; `None` when the walk declines (the caller then reads with its own walk).
pub(super) fn walk<'a>(
    mut walk: Walk<'a>,
    files: &[(PathBuf, Captures)],
    configs: &[i64],
    progress: super::collect::Progress,
) -> Option<(Walk<'a>, Counts)> {
    let mut fast = Fast::default();
    let mut first_seen = None;
    for (i, (path, file_caps)) in files.iter().enumerate() {
        let seen = hdf5::sync::sync(|| fast.file(&mut walk, path, file_caps, configs)).ok()?;
        match first_seen {
            None => first_seen = Some(seen),
            // A file with fewer matching datasets than the first: the exact walk names the
            // missing one and the nearest existing path.
            Some(first) if seen < first => return None,
            Some(_) => {}
        }
        progress(i + 1, files.len());
    }
    Some((walk, fast.work.counts))
}

/// The walk's reused buffers.
#[derive(Default)]
struct Fast {
    /// The path of the object being visited (`/group/name`).
    path: String,
    work: Work,
}

#[derive(Default)]
struct Work {
    /// The bytes of the file being walked (when it is held in memory).
    image: Vec<u8>,
    /// The values of the dataset being read, real and imaginary parts interleaved.
    values: Vec<f64>,
    /// The same, as read from single-precision data.
    singles: Vec<f32>,
    /// Dataset path -> what it matched, if anything.
    matches: HashMap<String, Option<Matched>>,
    counts: Counts,
}

/// A dataset path that matched a template.
struct Matched {
    /// Whether it matched the two-point template.
    is_two: bool,
    caps: Captures,
    /// Its channel, when it depends on the dataset path alone (the file path names the
    /// configuration only, the dataset path does not).
    channel: Option<Channel>,
}

/// The channel of a dataset path.
struct Channel {
    kind: Kind,
    source: Option<i64>,
    /// Its place in the accumulator of its kind, once known.
    slot: Option<usize>,
}

/// One open file and where its datasets' rows go.
struct FileCtx<'a> {
    h5: &'a hdf5::File,
    path: &'a Path,
    len: u64,
    caps: &'a Captures,
    rows: &'a [usize],
    axis: Option<usize>,
    in_memory: bool,
}

impl Fast {
    /// Walk one file; returns how many datasets matched a template. The caller holds the
    /// library lock.
    fn file(
        &mut self,
        walk: &mut Walk,
        path: &Path,
        file_caps: &Captures,
        configs: &[i64],
    ) -> Step<usize> {
        use std::io::Read;
        let mut f = crate::io::open_regular(path).map_err(|_| Declined)?;
        let len = f.metadata().map_err(|_| Declined)?.len();
        let in_memory = len <= IN_MEMORY_LIMIT;
        let image = &mut self.work.image;
        image.clear();
        let h5 = if in_memory {
            f.read_to_end(image).map_err(|_| Declined)?;
            if image.len() as u64 != len || !has_signature(image) {
                return Err(Declined);
            }
            drop(f);
            hdf5::File::with_options()
                .with_fapl(|p| p.core_filebacked(false).evict_on_close(true))
                .open(path)
                .map_err(|_| Declined)?
        } else {
            super::dataset::find_signature(&mut f, len, path).map_err(|_| Declined)?;
            drop(f);
            hdf5::File::with_options()
                .with_fapl(|p| p.evict_on_close(true))
                .open(path)
                .map_err(|_| Declined)?
        };
        let (rows, axis) = walk.rows(file_caps, configs);
        let ctx = FileCtx {
            h5: &h5,
            path,
            len,
            caps: file_caps,
            rows: &rows,
            axis,
            in_memory,
        };
        self.path.clear();
        let mut seen = 0;
        self.group(walk, &ctx, h5.id(), 0, &mut seen)?;
        walk.n_datasets += seen;
        self.work.counts.in_memory += usize::from(in_memory);
        Ok(seen)
    }

    /// Visit the objects of group `group` (at depth `depth`) in the order of the exact walk
    /// (`files::dataset_paths`: by name, groups entered where they stand).
    fn group(
        &mut self,
        walk: &mut Walk,
        ctx: &FileCtx,
        group: hid_t,
        depth: usize,
        seen: &mut usize,
    ) -> Step<()> {
        if depth > MAX_DEPTH {
            return Err(Declined);
        }
        let links = Links::of(group)?;
        let prefix = self.path.len();
        for link in &links.items {
            self.path.truncate(prefix);
            self.path.push('/');
            self.path.push_str(links.name(link));
            // Soft, external and user-defined links resolve by name: the exact walk's.
            let addr = link.addr.ok_or(Declined)?;
            // SAFETY: `group` is an open group (or file) of the file the link was listed
            // from, and `addr` the object header address its hard link holds.
            let object = Id::new(
                unsafe { hdf5_sys::h5o::H5Oopen_by_addr(group, addr) },
                Id::OBJECT,
            )?;
            // SAFETY: `object` is an identifier the walk holds open.
            match unsafe { hdf5_sys::h5i::H5Iget_type(object.id) } {
                H5I_type_t::H5I_GROUP => self.group(walk, ctx, object.id, depth + 1, seen)?,
                H5I_type_t::H5I_DATASET => {
                    if self.work.dataset(walk, ctx, object.id, &self.path)? {
                        *seen += 1;
                    } else {
                        walk.ignored += 1;
                    }
                }
                H5I_type_t::H5I_BADID => return Err(Declined),
                _ => {}
            }
        }
        self.path.truncate(prefix);
        Ok(())
    }
}

impl Work {
    /// Match dataset `name` (open as `id`) against the templates and, when it matches, read
    /// it into its channel. Returns whether it matched.
    fn dataset(&mut self, walk: &mut Walk, ctx: &FileCtx, id: hid_t, name: &str) -> Step<bool> {
        let Work {
            image,
            values,
            singles,
            matches,
            counts,
        } = self;
        if !matches.contains_key(name) {
            let found = if let Some(c) = walk.two_tpl.matches(name) {
                Some((true, c))
            } else {
                walk.three_tpl.matches(name).map(|c| (false, c))
            };
            let matched = found.map(|(is_two, caps)| Matched {
                is_two,
                caps,
                channel: None,
            });
            matches.insert(name.to_string(), matched);
        }
        let Some(Some(Matched {
            is_two,
            caps,
            channel,
        })) = matches.get_mut(name)
        else {
            return Ok(false);
        };
        let by_path_alone = ctx.caps.iter().all(|(n, _)| *n == "config")
            && caps.iter().all(|(n, _)| *n != "config");
        let fresh;
        let (kind, source, slot) = if by_path_alone {
            if channel.is_none() {
                let (kind, source) = walk
                    .channel(ctx.caps, ctx.path, name, caps, *is_two)
                    .map_err(|_| Declined)?;
                *channel = Some(Channel {
                    kind,
                    source,
                    slot: None,
                });
            }
            let Some(Channel { kind, source, slot }) = channel else {
                return Err(Declined);
            };
            (&*kind, *source, Some(slot))
        } else {
            fresh = walk
                .channel(ctx.caps, ctx.path, name, caps, *is_two)
                .map_err(|_| Declined)?;
            (&fresh.0, fresh.1, None)
        };
        let need = match kind {
            Kind::Two(_) => walk.t_extent,
            Kind::Three(key) => Some(key.tsep as usize + 1),
        };
        let raw = read_raw(&walk.types, ctx, id, need, image, values, singles, counts)?;
        let Some((n_t, keep)) = raw else {
            // A type not seen before, or storage that needs the creation properties: the
            // per-dataset reader, on the same open file.
            let block = read_block(
                ctx.h5,
                ctx.path,
                ctx.len,
                name,
                ctx.axis,
                need,
                &mut walk.types,
            )
            .map_err(|_| Declined)?;
            counts.per_dataset += 1;
            let (rows, path) = (ctx.rows, ctx.path);
            let added = match kind {
                Kind::Two(key) => walk.two.add(
                    key.clone(),
                    &block,
                    rows,
                    source,
                    caps,
                    path,
                    name,
                    describe_two,
                ),
                Kind::Three(key) => walk.three.add(
                    key.clone(),
                    &block,
                    rows,
                    source,
                    caps,
                    path,
                    name,
                    describe_three,
                ),
            };
            return added.map(|()| true).map_err(|_| Declined);
        };
        let v = &*values;
        let value = |row: usize, t: usize| {
            let i = 2 * (row * n_t + t);
            (v[i], v[i + 1])
        };
        let new = Dataset {
            n_t: keep,
            caps,
            source,
            ctx,
            name,
        };
        let added = match kind {
            Kind::Two(key) => new.add(&mut walk.two, key, slot, describe_two, value),
            Kind::Three(key) => new.add(&mut walk.three, key, slot, describe_three, value),
        };
        added.map(|()| true).map_err(|_| Declined)
    }
}

/// A dataset read by the fast walk, on its way into its channel.
struct Dataset<'a> {
    /// Time slices kept.
    n_t: usize,
    caps: &'a Captures,
    source: Option<i64>,
    ctx: &'a FileCtx<'a>,
    name: &'a str,
}

impl Dataset<'_> {
    /// Add the values to channel `key` of `acc`, whose place `slot` keeps between files
    /// (when the channel depends on the dataset path alone).
    fn add<K: Ord + Clone>(
        self,
        acc: &mut super::collect::Acc<K>,
        key: &K,
        slot: Option<&mut Option<usize>>,
        describe: impl Fn(&K) -> String,
        value: impl Fn(usize, usize) -> (f64, f64),
    ) -> crate::error::Result<()> {
        let (ctx, name) = (self.ctx, self.name);
        let mut place = || acc.slot(key, self.n_t, self.caps, ctx.path, name);
        let i = match slot {
            Some(Some(i)) => *i,
            Some(cached) => *cached.insert(place()),
            None => place(),
        };
        acc.add_at(
            i,
            key,
            self.n_t,
            ctx.rows,
            self.source,
            ctx.path,
            name,
            describe,
            value,
        )
    }
}

/// Read dataset `id` into `values` (real and imaginary parts interleaved, rows x `n_t`) with
/// the checks of `dataset::read_block`; returns `(n_t, time slices kept)`, or `None` when the
/// per-dataset reader must read it (a type not in `types`, storage without a file offset).
#[allow(clippy::too_many_arguments)]
fn read_raw(
    types: &TypeCache,
    ctx: &FileCtx,
    id: hid_t,
    need: Option<usize>,
    image: &[u8],
    values: &mut Vec<f64>,
    singles: &mut Vec<f32>,
    counts: &mut Counts,
) -> Step<Option<(usize, usize)>> {
    use hdf5_sys::{h5d, h5s};
    // SAFETY (every call below): `id` is a dataset the walk holds open; the type and space
    // identifiers are closed by their guards; buffers are sized as stated at each call.
    let dtype = Id::new(unsafe { h5d::H5Dget_type(id) }, Id::TYPE)?;
    let Some(known) = types.find_raw(dtype.id) else {
        return Ok(None);
    };
    let space = Id::new(unsafe { h5d::H5Dget_space(id) }, Id::SPACE)?;
    let rank = unsafe { h5s::H5Sget_simple_extent_ndims(space.id) };
    let rank = usize::try_from(rank).map_err(|_| Declined)?;
    let mut dims: [hsize_t; 32] = [0; 32];
    if rank > dims.len() {
        return Err(Declined);
    }
    // `dims` holds 32 values, at least `rank`.
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
    let (rows, n_t) = block_shape(shape, &known.storage, ctx.axis).map_err(|_| Declined)?;
    // The size against the file, as `dataset::check_size` does for a dataset with an offset.
    let bytes = shape
        .iter()
        .try_fold(known.elem as u64, |acc, &d| acc.checked_mul(d as u64))
        .ok_or(Declined)?;
    let offset: haddr_t = unsafe { h5d::H5Dget_offset(id) };
    if offset == HADDR_UNDEF {
        return Ok(None);
    }
    if bytes > ctx.len.saturating_sub(offset) {
        return Err(Declined);
    }
    let keep = need.unwrap_or(n_t);
    if n_t < keep {
        return Err(Declined);
    }
    let single = known.storage.single();
    let width: usize = if single { 4 } else { 8 };
    let floats = 2 * rows * n_t;
    let mem = known.mem_size;
    if bytes != (floats * width) as u64 || (mem != width && mem != 2 * width) {
        return Err(Declined);
    }
    values.clear();
    if known.exact && ctx.in_memory {
        // The library would copy these bytes unchanged (file type = memory type).
        let start = usize::try_from(offset).map_err(|_| Declined)?;
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
    } else {
        use hdf5_sys::{h5p::H5P_DEFAULT, h5s::H5S_ALL};
        // `values` / `singles` hold `floats` values: the whole dataset in the memory type
        // (one float, or a pair of them per element), checked above.
        let status = if single {
            singles.clear();
            singles.resize(floats, 0.0);
            let s = unsafe {
                h5d::H5Dread(
                    id,
                    known.mem.id(),
                    H5S_ALL,
                    H5S_ALL,
                    H5P_DEFAULT,
                    singles.as_mut_ptr().cast(),
                )
            };
            values.extend(singles.iter().map(|&x| f64::from(x)));
            s
        } else {
            values.resize(floats, 0.0);
            unsafe {
                h5d::H5Dread(
                    id,
                    known.mem.id(),
                    H5S_ALL,
                    H5S_ALL,
                    H5P_DEFAULT,
                    values.as_mut_ptr().cast(),
                )
            }
        };
        if status < 0 {
            return Err(Declined);
        }
        counts.library += 1;
    }
    for r in 0..rows {
        let row = &values[2 * r * n_t..2 * (r * n_t + keep)];
        if !row.iter().all(|x| x.is_finite()) {
            return Err(Declined);
        }
    }
    Ok(Some((n_t, keep)))
}

/// An identifier the walk opened, closed when dropped.
struct Id {
    id: hid_t,
    close: unsafe extern "C" fn(hid_t) -> herr_t,
}

impl Id {
    const OBJECT: unsafe extern "C" fn(hid_t) -> herr_t = hdf5_sys::h5o::H5Oclose;
    const TYPE: unsafe extern "C" fn(hid_t) -> herr_t = hdf5_sys::h5t::H5Tclose;
    const SPACE: unsafe extern "C" fn(hid_t) -> herr_t = hdf5_sys::h5s::H5Sclose;

    /// Take ownership of `id`, the result of an open; a negative one is a failed open.
    fn new(id: hid_t, close: unsafe extern "C" fn(hid_t) -> herr_t) -> Step<Id> {
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
struct Links {
    names: String,
    items: Vec<Link>,
}

struct Link {
    start: usize,
    end: usize,
    /// The object header address of a hard link.
    addr: Option<haddr_t>,
}

impl Links {
    /// List the links of `group` (one `H5Literate` by name, the order of the exact walk).
    fn of(group: hid_t) -> Step<Links> {
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

    fn name(&self, link: &Link) -> &str {
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

#[cfg(test)]
mod tests {
    //! The fast walk against the exact walk on the h5py fixtures (`tests/fixtures/hdf5`,
    //! written by `make_fixtures.py`) and on copies changed by the library: where the fast walk
    //! finishes it must give the exact walk's data bit for bit and its notes, and the counts
    //! show which of its ways read each dataset.

    use super::super::collect::{read_mapped, read_with, Collected, Mode};
    use super::super::mapping::{Hdf5Source, Mapping};
    use super::Counts;
    use crate::data::Series;
    use std::path::{Path, PathBuf};

    fn fixtures() -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/hdf5")
    }

    fn mapping(dir: &Path, yaml: &str) -> Mapping {
        let src: Hdf5Source = serde_yaml_ng::from_str(yaml).unwrap();
        src.resolve(dir, "data.hdf5").unwrap()
    }

    const PERCFG: &str =
        "{files: 'percfg/conf{config}.h5', twopt: '/2pt/{smear}/p{px}_{py}_{pz}', \
        threept: '/3pt/tsep{tsep}/{current}/{projector}/pf{pfx}{pfy}{pfz}_q{qx}_{qy}_{qz}'}";
    const FIXED: &str =
        "fixed: {projector: unpol, pfx: '0', pfy: '0', pfz: '0', qx: '0', qy: '0', qz: '1'}";

    fn bits(s: &Series) -> (usize, usize, Vec<u64>, Vec<u64>) {
        let b = |v: &[f64]| v.iter().map(|x| x.to_bits()).collect();
        (s.n_t, s.n_cfg, b(&s.re), b(&s.im))
    }

    fn assert_same(fast: &Collected, exact: &Collected) {
        assert_eq!(fast.notes, exact.notes);
        assert_eq!(fast.twopt.configs, exact.twopt.configs);
        assert_eq!(fast.threept.configs, exact.threept.configs);
        let two = |c: &Collected| -> Vec<_> {
            c.twopt
                .channels
                .iter()
                .map(|(k, s)| (k.clone(), bits(s)))
                .collect()
        };
        let three = |c: &Collected| -> Vec<_> {
            c.threept
                .channels
                .iter()
                .map(|(k, s)| (k.clone(), bits(s)))
                .collect()
        };
        assert_eq!(two(fast), two(exact));
        assert_eq!(three(fast), three(exact));
        assert!(!fast.twopt.channels.is_empty() && !fast.threept.channels.is_empty());
    }

    /// Read `m` with both walks; the fast one must finish with the exact one's result.
    fn both(m: &Mapping, t: Option<usize>) -> (Collected, Counts) {
        let (fast, counts) = read_with(m, t, &|_, _| {}, Mode::Fast).unwrap();
        let (exact, none) = read_with(m, t, &|_, _| {}, Mode::Exact).unwrap();
        assert!(none.is_none());
        assert_same(&fast, &exact);
        let counts = counts.unwrap();
        let n = counts.copied + counts.library + counts.per_dataset;
        assert!(
            fast.notes[0].starts_with(&format!("read {n} datasets")),
            "{:?}",
            fast.notes
        );
        (fast, counts)
    }

    #[test]
    fn the_fast_walk_gives_the_exact_walks_data_on_every_fixture_layout() {
        // percfg: 4 files x (6 two-point + 4 three-point) datasets in nested groups, four file
        // types (f64 little- and big-endian, f32, complex128 as compound {r, i}); each type's
        // first dataset goes through the per-dataset reader, the big-endian ones are converted
        // by the library, every other one is taken from the file's bytes.
        let (_, counts) = both(&mapping(&fixtures(), PERCFG), Some(8));
        let want = Counts {
            in_memory: 4,
            copied: 29,
            library: 7,
            per_dataset: 4,
        };
        assert_eq!(counts, want);
        // Source positions in the path, averaged.
        let sources = format!(
            "{{files: 'sources/conf{{config}}.h5', twopt: '/src{{source}}/p{{px}}_{{py}}_{{pz}}', \
             threept: '/src{{source}}/c3/tsep{{tsep}}_{{current}}', {FIXED}}}"
        );
        both(&mapping(&fixtures(), &sources), None);
        // One file with a configuration axis: chunked + gzip two-point data (no file offset:
        // the per-dataset reader, which checks the creation properties), contiguous
        // three-point data (the first through the per-dataset reader, a new type).
        let onefile = format!(
            "{{file: onefile.h5, configs: /configs, twopt: '/c2/p{{px}}{{py}}{{pz}}', \
             threept: '/c3/tsep{{tsep}}/{{current}}', {FIXED}}}"
        );
        let (_, counts) = both(&mapping(&fixtures(), &onefile), Some(8));
        let want = Counts {
            in_memory: 1,
            copied: 1,
            library: 0,
            per_dataset: 4,
        };
        assert_eq!(counts, want);
        // Operator labels in the path, three levels of groups.
        let operators = format!(
            "{{files: 'operators/conf{{config}}.h5', \
             twopt: '/2pt/p{{px}}_{{py}}_{{pz}}/snk_{{sink_op}}/src_{{source_op}}', \
             threept: '/3pt/tsep{{tsep}}/{{current}}/snk_{{sink_op}}/src_{{source_op}}', {FIXED}}}"
        );
        both(&mapping(&fixtures(), &operators), None);
    }

    /// Copies of the four percfg files in a fresh directory.
    fn percfg_copy() -> tempfile::TempDir {
        let dir = tempfile::tempdir().unwrap();
        std::fs::create_dir(dir.path().join("percfg")).unwrap();
        for cfg in [100, 104, 108, 112] {
            let name = format!("percfg/conf{cfg}.h5");
            std::fs::copy(fixtures().join(&name), dir.path().join(&name)).unwrap();
        }
        dir
    }

    #[test]
    fn an_extra_unrelated_dataset_is_ignored_as_before() {
        let dir = percfg_copy();
        {
            let f = hdf5::File::open_rw(dir.path().join("percfg/conf104.h5")).unwrap();
            let extra = f
                .new_dataset::<f64>()
                .shape(4)
                .create("/2pt/extra")
                .unwrap();
            extra.write_raw(&[1.0, 2.0, 3.0, 4.0]).unwrap();
            f.new_dataset::<f64>().shape(2).create("/zzz").unwrap();
        }
        let (fast, counts) = both(&mapping(dir.path(), PERCFG), Some(8));
        assert_eq!(counts.copied + counts.library + counts.per_dataset, 40);
        // /meta/note in every file, and the two new datasets.
        assert!(
            fast.notes
                .iter()
                .any(|n| n == "ignored 6 dataset(s) that match neither dataset template"),
            "{:?}",
            fast.notes
        );
    }

    #[test]
    fn a_soft_link_makes_the_fast_walk_decline_and_the_read_is_the_exact_walks() {
        let dir = percfg_copy();
        {
            let f = hdf5::File::open_rw(dir.path().join("percfg/conf108.h5")).unwrap();
            f.link_soft("/2pt/SS/p0_0_0", "/alias").unwrap();
        }
        let m = mapping(dir.path(), PERCFG);
        assert!(read_with(&m, Some(8), &|_, _| {}, Mode::Fast).is_err());
        let (auto, counts) = read_with(&m, Some(8), &|_, _| {}, Mode::Auto).unwrap();
        assert!(counts.is_none(), "the exact walk read the files");
        let (exact, _) = read_with(&m, Some(8), &|_, _| {}, Mode::Exact).unwrap();
        assert_same(&auto, &exact);
        // The link is followed by the exact walk: a fifth dataset matching no template.
        assert!(
            auto.notes
                .iter()
                .any(|n| n == "ignored 5 dataset(s) that match neither dataset template"),
            "{:?}",
            auto.notes
        );
    }

    #[test]
    fn a_missing_dataset_makes_the_fast_walk_decline_and_is_named_with_the_nearest_path() {
        let m = mapping(&fixtures(), &PERCFG.replace("percfg/", "missing/"));
        assert!(read_with(&m, Some(8), &|_, _| {}, Mode::Fast).is_err());
        let e = read_mapped(&m, Some(8), &|_, _| {})
            .err()
            .unwrap()
            .to_string();
        assert!(e.contains("conf104.h5"), "{e}");
        assert!(e.contains("`/2pt/SP/p0_0_1` is missing"), "{e}");
        assert!(e.contains("nearest existing path: `/2pt/SP/p0_0_0`"), "{e}");
        // The same when the file lacking it is larger than the first (an unrelated extra
        // dataset), so that the count of matching datasets tells it apart, not the size.
        let dir = tempfile::tempdir().unwrap();
        std::fs::create_dir(dir.path().join("missing")).unwrap();
        for cfg in [100, 104, 108, 112] {
            let name = format!("missing/conf{cfg}.h5");
            std::fs::copy(fixtures().join(&name), dir.path().join(&name)).unwrap();
        }
        {
            let f = hdf5::File::open_rw(dir.path().join("missing/conf104.h5")).unwrap();
            f.new_dataset::<f64>()
                .shape(2)
                .create("/2pt/SP/unrelated")
                .unwrap();
        }
        let m = mapping(dir.path(), &PERCFG.replace("percfg/", "missing/"));
        let e = read_mapped(&m, Some(8), &|_, _| {})
            .err()
            .unwrap()
            .to_string();
        assert!(
            e.contains("conf104.h5") && e.contains("`/2pt/SP/p0_0_1` is missing"),
            "{e}"
        );
    }

    #[test]
    fn errors_are_the_exact_walks() {
        // A time axis too short: the fast walk declines at the first three-point dataset and
        // the exact walk reports it, naming file and dataset.
        let m = mapping(&fixtures(), PERCFG);
        let auto = read_mapped(&m, Some(12), &|_, _| {})
            .err()
            .unwrap()
            .to_string();
        let exact = read_with(&m, Some(12), &|_, _| {}, Mode::Exact)
            .err()
            .unwrap()
            .to_string();
        assert_eq!(auto, exact);
        assert!(
            auto.contains("has 10 time slices; 12 are needed") && auto.contains("conf100.h5"),
            "{auto}"
        );
    }
}

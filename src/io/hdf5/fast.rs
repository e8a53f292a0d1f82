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

use super::dataset::read_block;
use super::files::MAX_DEPTH;
use super::open::{find_signature, has_signature};
use super::raw::{read_raw, Counts, Declined, Id, Links, Step, Stored};
use super::template::Captures;
use super::walk::{describe_three, describe_two, Acc, Kind, Progress, Walk};
use hdf5_sys::h5i::{hid_t, H5I_type_t};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// Files up to this size are read into memory once and opened from there; larger ones (one
/// file holding a whole ensemble) are opened from disk and read with one library read per
/// dataset.
const IN_MEMORY_LIMIT: u64 = 256 << 20;

/// Walk every file; `None` when the walk declines (the caller then reads with its own walk).
pub(super) fn walk<'a>(
    mut walk: Walk<'a>,
    files: &[(PathBuf, Captures)],
    configs: &[i64],
    progress: Progress,
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
            find_signature(&mut f, len, path).map_err(|_| Declined)?;
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
        let stored = Stored {
            len: ctx.len,
            axis: ctx.axis,
            image: ctx.in_memory.then_some(image.as_slice()),
        };
        let raw = read_raw(&walk.types, &stored, id, need, values, singles, counts)?;
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
        acc: &mut Acc<K>,
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

#[cfg(test)]
mod tests {
    //! The fast walk against the exact walk on the h5py fixtures (`tests/fixtures/hdf5`,
    //! written by `make_fixtures.py`) and on copies changed by the library: where the fast walk
    //! finishes it must give the exact walk's data bit for bit and its notes, and the counts
    //! show which of its ways read each dataset.

    use super::super::collect::{read_mapped, read_with, Mode};
    use super::super::mapping::{Hdf5Source, Mapping};
    use super::super::raw::Counts;
    use super::super::walk::Collected;
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

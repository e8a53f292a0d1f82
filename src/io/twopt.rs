//! The two-point table reader (docs/data-format.md, "Two-point table").
//!
//! Time-axis rule: `T = max t + 1` over the whole table, and every channel must have every
//! `t = 0..T-1` for every configuration.

use super::accumulator::{key_order, Accumulator, Summary, Visit};
use super::blocks::{open_rows, push_label, LocalKeys, RowParser};
use super::digest::{FileDigest, Hashing};
use super::key_cache::KeyCache;
use super::row::Row;
use super::row::{ParsedRow, ValueColumns};
use super::table::{display_name, no_data_rows, open, Column};
use crate::data::{Operators, Series, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use std::collections::BTreeMap;
use std::io::Read;
use std::path::{Path, PathBuf};

const CONFIG: usize = 0;
const PX: usize = 1;
const T: usize = 4;
const RE: usize = 5;
const IM: usize = 6;
const SOURCE: usize = 7;
const SMEAR: usize = 8;
const SINK_OP: usize = 9;
const SOURCE_OP: usize = 10;
/// The columns that make up a channel key.
const KEY_COLUMNS: [usize; 6] = [PX, PX + 1, PX + 2, SMEAR, SINK_OP, SOURCE_OP];

const SCHEMA: &[Column] = &[
    Column::required("config"),
    Column::required("px"),
    Column::required("py"),
    Column::required("pz"),
    Column::required("t"),
    Column::required("re"),
    Column::required("im"),
    Column::optional("source"),
    Column::optional("smear"),
    Column::optional("sink_op"),
    Column::optional("source_op"),
];

/// Read a two-point table from a file (`-` for standard input).
pub fn read_twopt(path: &Path) -> Result<TwoPointData> {
    Ok(read_with_summary(path)?.0)
}

/// Read a two-point table from any reader; `name` is used in messages.
pub fn read_twopt_from<R: Read>(input: R, name: &Path) -> Result<TwoPointData> {
    Ok(read_inner(input, name.to_path_buf())?.0)
}

pub(crate) fn read_with_summary(path: &Path) -> Result<(TwoPointData, Summary)> {
    read_inner(open(path)?, display_name(path))
}

/// [`read_with_summary`] plus the digest of the bytes read (for the run manifest).
pub(crate) fn read_hashed(path: &Path) -> Result<(TwoPointData, Summary, FileDigest)> {
    let mut input = Hashing::new(open(path)?);
    let (data, summary) = read_inner(&mut input, display_name(path))?;
    // The reader stops at the end of the input; anything it left unread still counts.
    let digest = input.finish(path).map_err(|e| Error::io(path, e))?;
    Ok((data, summary, digest))
}

pub(crate) fn read_inner<R: Read>(input: R, file: PathBuf) -> Result<(TwoPointData, Summary)> {
    let Gathered {
        acc,
        keys,
        file,
        max_t,
    } = gather(input, file, None)?;
    let Some(max_t) = max_t else {
        return Err(no_data_rows(file));
    };
    let n_t = max_t as usize + 1;
    let order = key_order(&keys);
    let done = acc.finish(&order, |_| n_t, missing_row(&file, &keys, n_t))?;
    let n_cfg = done.configs.len();
    let channels: BTreeMap<TwoPointKey, Series> = keys
        .into_iter()
        .zip(done.values)
        .map(|(k, (re, im))| (k, Series { n_cfg, n_t, re, im }))
        .collect();
    Ok((
        TwoPointData {
            configs: done.configs,
            channels,
        },
        done.summary,
    ))
}

/// Read a two-point table grouped by channel, handing each channel to `visit` when the next
/// begins (one channel's values in memory at a time, see `accumulator/grouped.rs`), with
/// the errors of [`read_inner`]; returns the configurations and the summary, or `None` when
/// a channel reappears after another (the table is not grouped; read it whole instead).
pub(crate) fn read_grouped<R: Read>(
    input: R,
    file: PathBuf,
    visit: Visit<TwoPointKey>,
) -> Result<Option<(Vec<i64>, Summary)>> {
    let Gathered {
        acc,
        keys,
        file,
        max_t,
    } = gather(input, file, Some(&mut *visit))?;
    if acc.reappeared() {
        return Ok(None);
    }
    let Some(max_t) = max_t else {
        return Err(no_data_rows(file));
    };
    let n_t = max_t as usize + 1;
    let order = key_order(&keys);
    let missing = missing_row(&file, &keys, n_t);
    let done = acc.finish_grouped(&order, |_| n_t, missing, &mut |&id, s| {
        visit(&keys[id as usize], s)
    })?;
    Ok(Some(done))
}

/// The rows of a table in the accumulator, its channels' keys by channel id.
struct Gathered {
    acc: Accumulator,
    keys: Vec<TwoPointKey>,
    file: PathBuf,
    /// The largest `t` of any row.
    max_t: Option<u32>,
}

/// Read the rows of a table into an accumulator; with `visit`, a grouped one whose closed
/// channels `visit` sees. A grouped read that met a channel again stops there without error
/// (see [`Accumulator::reappeared`]).
fn gather<R: Read>(
    input: R,
    file: PathBuf,
    mut visit: Option<Visit<TwoPointKey>>,
) -> Result<Gathered> {
    let (header, rows) = open_rows(input, file, SCHEMA)?;
    header.check_paired(SINK_OP, SOURCE_OP, SCHEMA)?;
    let parser = Parser {
        with_source: header.index[SOURCE].is_some(),
        with_smear: header.index[SMEAR].is_some(),
    };
    let mut acc = match visit {
        Some(_) => Accumulator::grouped(parser.with_source),
        None => Accumulator::new(parser.with_source),
    };
    let mut keys: Vec<TwoPointKey> = Vec::new();
    let mut max_t: Option<u32> = None;
    let read = rows.for_each_batch(&header, &parser, |batch| {
        max_t = max_t.max(batch.rows.iter().map(|r| r.t).max());
        batch.merge(&mut acc, &mut keys, &header, |k, t| {
            format!("two-point {} t={t}", super::describe_twopt(k))
        })?;
        match visit.as_mut() {
            Some(v) => acc.close_ready(&mut |&id, s| v(&keys[id as usize], s)),
            None => Ok(()),
        }
    });
    if !acc.reappeared() {
        read?;
    }
    Ok(Gathered {
        acc,
        keys,
        file: header.file,
        max_t,
    })
}

/// The error of the first missing value `(channel, t, configuration, first line of the
/// channel)` of a table with `n_t` time slices.
fn missing_row<'a>(
    file: &'a Path,
    keys: &'a [TwoPointKey],
    n_t: usize,
) -> impl Fn(u32, usize, i64, u64) -> Error + 'a {
    move |id, t, config, line| Error::Table {
        path: file.to_path_buf(),
        message: format!(
            "missing row: two-point {} t={t} has no value for configuration {config} \
             (channel first seen at line {line}); every channel needs t = 0..{} \
             (T = max t + 1) for every configuration",
            super::describe_twopt(&keys[id as usize]),
            n_t - 1
        ),
    }
}

/// What the two-point table's header says about its rows.
struct Parser {
    with_source: bool,
    with_smear: bool,
}

impl RowParser for Parser {
    type Key = TwoPointKey;

    fn parse(
        &self,
        rd: &Row,
        cache: &mut KeyCache,
        keys: &mut LocalKeys<TwoPointKey>,
    ) -> Result<ParsedRow> {
        let config = rd.int(CONFIG, SCHEMA)?;
        let key = cache.channel_id(rd, &KEY_COLUMNS, || self.channel_key(rd, keys))?;
        let t = rd.time(T, SCHEMA)?;
        let cols = ValueColumns {
            re: RE,
            im: IM,
            source: self.with_source.then_some(SOURCE),
        };
        ParsedRow::read(rd, (key, t, config), &cols, SCHEMA)
    }
}

impl Parser {
    /// Parse the key columns of the row and return its batch-local key index, registering a
    /// new key when it is new.
    fn channel_key(&self, rd: &Row, keys: &mut LocalKeys<TwoPointKey>) -> Result<u32> {
        let mut momentum = [0i32; 3];
        for (i, p) in momentum.iter_mut().enumerate() {
            *p = rd.mom(PX + i, SCHEMA)?;
        }
        let mut enc = Vec::with_capacity(32);
        for p in momentum {
            enc.extend_from_slice(&p.to_le_bytes());
        }
        let smear = if self.with_smear {
            rd.text(SMEAR, SCHEMA)?
        } else {
            ""
        };
        push_label(&mut enc, smear);
        let ops = rd.operators(SINK_OP, SOURCE_OP, SCHEMA)?;
        if let Some((a, b)) = ops {
            push_label(&mut enc, a);
            push_label(&mut enc, b);
        }
        Ok(keys.id(&enc, || TwoPointKey {
            momentum,
            smear: (!smear.is_empty()).then(|| smear.to_string()),
            ops: ops.map(|(a, b)| Operators::new(a, b)),
        }))
    }
}

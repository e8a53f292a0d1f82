//! The three-point table reader (docs/data-format.md, "Three-point table").
//!
//! Time-axis rule: each channel (one `tsep`) has every insertion time `tau = 0..=tsep` for
//! every configuration; `tau` outside `[0, tsep]` is an error at its row.

use super::accumulator::{key_order, Accumulator, Summary, Visit};
use super::blocks::{open_rows, push_label, LocalKeys, RowParser};
use super::digest::{FileDigest, Hashing};
use super::key_cache::KeyCache;
use super::row::Row;
use super::row::{ParsedRow, ValueColumns};
use super::table::{display_name, no_data_rows, open, Column};
use crate::data::{Current, Diagram, Operators, Projector, Series, ThreePointData, ThreePointKey};
use crate::error::{Error, Result};
use std::collections::BTreeMap;
use std::io::Read;
use std::path::{Path, PathBuf};

const CONFIG: usize = 0;
const TSEP: usize = 1;
const TAU: usize = 2;
const PFX: usize = 3;
const QX: usize = 6;
const CURRENT: usize = 9;
const PROJECTOR: usize = 10;
const RE: usize = 11;
const IM: usize = 12;
const FLAVOR: usize = 13;
const DIAGRAM: usize = 14;
const SOURCE: usize = 15;
const SINK_OP: usize = 16;
const SOURCE_OP: usize = 17;
/// The columns that make up a channel key.
const KEY_COLUMNS: [usize; 13] = [
    TSEP,
    PFX,
    PFX + 1,
    PFX + 2,
    QX,
    QX + 1,
    QX + 2,
    CURRENT,
    PROJECTOR,
    FLAVOR,
    DIAGRAM,
    SINK_OP,
    SOURCE_OP,
];

const SCHEMA: &[Column] = &[
    Column::required("config"),
    Column::required("tsep"),
    Column::required("tau"),
    Column::required("pfx"),
    Column::required("pfy"),
    Column::required("pfz"),
    Column::required("qx"),
    Column::required("qy"),
    Column::required("qz"),
    Column::required("current"),
    Column::required("projector"),
    Column::required("re"),
    Column::required("im"),
    Column::optional("flavor"),
    Column::optional("diagram"),
    Column::optional("source"),
    Column::optional("sink_op"),
    Column::optional("source_op"),
];

/// Read a three-point table from a file (`-` for standard input).
pub fn read_threept(path: &Path) -> Result<ThreePointData> {
    Ok(read_with_summary(path)?.0)
}

/// Read a three-point table from any reader; `name` is used in messages.
pub fn read_threept_from<R: Read>(input: R, name: &Path) -> Result<ThreePointData> {
    Ok(read_inner(input, name.to_path_buf())?.0)
}

pub(crate) fn read_with_summary(path: &Path) -> Result<(ThreePointData, Summary)> {
    read_inner(open(path)?, display_name(path))
}

/// [`read_with_summary`] plus the digest of the bytes read (for the run manifest).
pub(crate) fn read_hashed(path: &Path) -> Result<(ThreePointData, Summary, FileDigest)> {
    let mut input = Hashing::new(open(path)?);
    let (data, summary) = read_inner(&mut input, display_name(path))?;
    // The reader stops at the end of the input; anything it left unread still counts.
    let digest = input.finish(path).map_err(|e| Error::io(path, e))?;
    Ok((data, summary, digest))
}

fn current_names() -> String {
    Current::ALL
        .iter()
        .map(|c| c.name())
        .collect::<Vec<_>>()
        .join(", ")
}

pub(crate) fn read_inner<R: Read>(input: R, file: PathBuf) -> Result<(ThreePointData, Summary)> {
    let (acc, keys, file) = gather(input, file, None)?;
    if keys.is_empty() {
        return Err(no_data_rows(file));
    }
    let order = key_order(&keys);
    let n_t = |id: u32| keys[id as usize].tsep as usize + 1;
    let done = acc.finish(&order, n_t, missing_row(&file, &keys))?;
    let n_cfg = done.configs.len();
    let channels: BTreeMap<ThreePointKey, Series> = keys
        .into_iter()
        .zip(done.values)
        .map(|(k, (re, im))| {
            let n_t = k.tsep as usize + 1;
            (k, Series { n_cfg, n_t, re, im })
        })
        .collect();
    Ok((
        ThreePointData {
            configs: done.configs,
            channels,
        },
        done.summary,
    ))
}

/// Read a three-point table grouped by channel, handing each channel to `visit` when the
/// next begins, with the errors of [`read_inner`]; `None` when the table is not grouped (as
/// `twopt::read_grouped`).
pub(crate) fn read_grouped<R: Read>(
    input: R,
    file: PathBuf,
    visit: Visit<ThreePointKey>,
) -> Result<Option<(Vec<i64>, Summary)>> {
    let (acc, keys, file) = gather(input, file, Some(&mut *visit))?;
    if acc.reappeared() {
        return Ok(None);
    }
    if keys.is_empty() {
        return Err(no_data_rows(file));
    }
    let order = key_order(&keys);
    let n_t = |id: u32| keys[id as usize].tsep as usize + 1;
    let missing = missing_row(&file, &keys);
    let done = acc.finish_grouped(&order, n_t, missing, &mut |&id, s| {
        visit(&keys[id as usize], s)
    })?;
    Ok(Some(done))
}

/// Read the rows of a table into an accumulator (its channels' keys by channel id, the
/// file's name); with `visit`, a grouped one (as `twopt::gather`).
fn gather<R: Read>(
    input: R,
    file: PathBuf,
    mut visit: Option<Visit<ThreePointKey>>,
) -> Result<(Accumulator, Vec<ThreePointKey>, PathBuf)> {
    let (header, rows) = open_rows(input, file, SCHEMA)?;
    header.check_paired(SINK_OP, SOURCE_OP, SCHEMA)?;
    let parser = Parser {
        with_source: header.index[SOURCE].is_some(),
        with_flavor: header.index[FLAVOR].is_some(),
        with_diagram: header.index[DIAGRAM].is_some(),
    };
    let mut acc = match visit {
        Some(_) => Accumulator::grouped(parser.with_source),
        None => Accumulator::new(parser.with_source),
    };
    let mut keys: Vec<ThreePointKey> = Vec::new();
    let read = rows.for_each_batch(&header, &parser, |batch| {
        batch.merge(&mut acc, &mut keys, &header, |k, tau| {
            format!("three-point {} tau={tau}", super::describe_threept(k))
        })?;
        match visit.as_mut() {
            Some(v) => acc.close_ready(&mut |&id, s| v(&keys[id as usize], s)),
            None => Ok(()),
        }
    });
    if !acc.reappeared() {
        read?;
    }
    Ok((acc, keys, header.file))
}

/// The error of the first missing value `(channel, tau, configuration, first line of the
/// channel)`.
fn missing_row<'a>(
    file: &'a Path,
    keys: &'a [ThreePointKey],
) -> impl Fn(u32, usize, i64, u64) -> Error + 'a {
    move |id, tau, config, line| Error::Table {
        path: file.to_path_buf(),
        message: format!(
            "missing row: three-point {} tau={tau} has no value for configuration {config} \
             (channel first seen at line {line}); every channel needs tau = 0..=tsep for \
             every configuration",
            super::describe_threept(&keys[id as usize])
        ),
    }
}

/// What the three-point table's header says about its rows.
struct Parser {
    with_source: bool,
    with_flavor: bool,
    with_diagram: bool,
}

impl RowParser for Parser {
    type Key = ThreePointKey;

    fn parse(
        &self,
        rd: &Row,
        cache: &mut KeyCache,
        keys: &mut LocalKeys<ThreePointKey>,
    ) -> Result<ParsedRow> {
        let config = rd.int(CONFIG, SCHEMA)?;
        let key = cache.channel_id(rd, &KEY_COLUMNS, || self.channel_key(rd, keys))?;
        let tsep = keys.get(key).tsep;
        let tau = rd.time(TAU, SCHEMA)?;
        if tau > tsep {
            return Err(Error::Data {
                location: rd.location(TAU, "tau"),
                message: format!("tau = {tau} lies outside [0, tsep] = [0, {tsep}]"),
            });
        }
        let cols = ValueColumns {
            re: RE,
            im: IM,
            source: self.with_source.then_some(SOURCE),
        };
        ParsedRow::read(rd, (key, tau, config), &cols, SCHEMA)
    }
}

impl Parser {
    /// Parse the key columns of the row and return its batch-local key index, registering a
    /// new key when it is new.
    fn channel_key(&self, rd: &Row, keys: &mut LocalKeys<ThreePointKey>) -> Result<u32> {
        let tsep = rd.time(TSEP, SCHEMA)?;
        let mut pf = [0i32; 3];
        let mut q = [0i32; 3];
        for i in 0..3 {
            pf[i] = rd.mom(PFX + i, SCHEMA)?;
            q[i] = rd.mom(QX + i, SCHEMA)?;
        }
        let name = rd.text(CURRENT, SCHEMA)?;
        let current = Current::parse(name).ok_or_else(|| Error::Data {
            location: rd.location(CURRENT, "current"),
            message: format!(
                "unknown current `{}`; expected one of {}",
                crate::error::excerpt(name.as_bytes()),
                current_names()
            ),
        })?;
        let name = rd.text(PROJECTOR, SCHEMA)?;
        let projector = Projector::parse(name).ok_or_else(|| Error::Data {
            location: rd.location(PROJECTOR, "projector"),
            message: format!(
                "unknown projector `{}`; expected one of unpol, pol1, pol2, pol3, none",
                crate::error::excerpt(name.as_bytes())
            ),
        })?;
        let diagram = if self.with_diagram {
            match rd.raw(DIAGRAM) {
                b"" => None,
                b"connected" => Some(Diagram::Connected),
                b"disconnected" => Some(Diagram::Disconnected),
                other => {
                    return Err(Error::Data {
                        location: rd.location(DIAGRAM, "diagram"),
                        message: format!(
                            "unknown diagram `{}`; expected connected, disconnected or an \
                             empty field",
                            crate::error::excerpt(other)
                        ),
                    })
                }
            }
        } else {
            None
        };
        let flavor = if self.with_flavor {
            rd.text(FLAVOR, SCHEMA)?
        } else {
            ""
        };
        let mut enc = Vec::with_capacity(64);
        enc.extend_from_slice(&tsep.to_le_bytes());
        for p in pf.iter().chain(q.iter()) {
            enc.extend_from_slice(&p.to_le_bytes());
        }
        enc.push(current as u8);
        enc.extend_from_slice(projector.name().as_bytes());
        enc.push(match diagram {
            None => 0,
            Some(Diagram::Connected) => 1,
            Some(Diagram::Disconnected) => 2,
        });
        push_label(&mut enc, flavor);
        let ops = rd.operators(SINK_OP, SOURCE_OP, SCHEMA)?;
        if let Some((a, b)) = ops {
            push_label(&mut enc, a);
            push_label(&mut enc, b);
        }
        Ok(keys.id(&enc, || ThreePointKey {
            tsep,
            pf,
            q,
            current,
            projector,
            flavor: (!flavor.is_empty()).then(|| flavor.to_string()),
            diagram,
            ops: ops.map(|(a, b)| Operators::new(a, b)),
        }))
    }
}

//! Readers and writers for the correlator exchange format (`docs/data-format.md`).
//!
//! Why it exists: every analysis starts from per-configuration correlators in "long" CSV
//! tables. This module streams them (csv crate over a buffered reader, one reused
//! `ByteRecord`, no per-row allocation once a channel is known) into the [`crate::data`]
//! model, and enforces every rule of the format, so later stages can assume dense,
//! complete, finite data.
//!
//! # Data model
//! A table becomes a map from channel key to [`crate::data::Series`]: time-major, the
//! configurations of one time slice contiguous (`values[t * n_cfg + cfg]`), configurations in
//! ascending `config` order (Monte Carlo order). A two-point channel is keyed by momentum and
//! `smear` label; a three-point channel by `tsep`, sink momentum, `q`, current, projector,
//! `flavor` and `diagram`.
//!
//! # Time-axis rule
//! - Two-point table: `T = max t + 1` over the whole table, and every channel has every
//!   `t = 0..T-1` for every configuration.
//! - Three-point table: each channel (one `tsep`) has every `tau = 0..=tsep` for every
//!   configuration. `tau` outside `[0, tsep]` is an error at its row.
//! - Negative `t`, `tsep` or `tau` is an error; time values above [`MAX_TIME`] are refused,
//!   so a corrupt field cannot make the reader allocate without bound.
//!
//! # Other rules
//! - Columns in any order; required columns must be present, unknown or repeated columns
//!   are errors (line 1, with the column number).
//! - Unparsable fields, non-finite numbers, unknown `current`, `projector` or `diagram`
//!   names are [`crate::Error::Data`] errors with file, line and column.
//! - An empty optional label (`smear`, `flavor`, `diagram`) means "no label".
//! - Rows with the same data point and configuration but different `source` are averaged
//!   (each configuration over its own sources); the same `source` twice, or a repeated row in
//!   a table without a `source` column, is a duplicate.
//! - Every channel has exactly one (source-averaged) value per configuration and time; the
//!   first missing one, in key order, is reported with the line where its channel first
//!   appeared.
//! - An empty file or a header without data rows is a [`crate::Error::Table`] error.
//! - [`read_dataset`] requires both tables to cover the same configurations, unless
//!   [`ReadOptions::keep_common_configs`] is set; then the others are dropped and listed.
//! - The path `-` reads standard input.
//!
//! Writers ([`write_twopt`], [`write_threept`]) produce deterministic output that reads back
//! to the same data. [`inspect`] summarises a data directory or table for the terminal;
//! it and `formfactory check` read a table one channel at a time ([`twopt_by_channel`],
//! [`threept_by_channel`]) with the errors of the whole read.
//!
//! # Speed
//! A row that continues the previous row's channel is matched on the raw bytes of its key
//! fields (one comparison per run of adjacent key columns) and not parsed again;
//! configurations are matched by predicting the next one; plain decimals take Clinger's exact
//! fast path (`number.rs`, bit for bit the standard parser); the SHA-256 of each
//! table for the run manifest is computed from the bytes as they are read. On the
//! `benches/read.rs` table (2.88 million rows, 218 MB) the reader needed about 1.5 s of CPU
//! time (about 1.9 million rows/s, 140 MB/s) before these changes, and keeps only the data
//! model in memory.

mod accumulator;
mod blocks;
mod by_channel;
mod digest;
pub mod hdf5;
pub mod inspect;
mod key_cache;
mod number;
mod open;
mod row;
pub mod seed;
mod table;
mod threept;
mod twopt;
mod write;

pub use by_channel::{threept_by_channel, twopt_by_channel, ByChannel};
pub use digest::FileDigest;
pub use open::{not_a_regular_file, open_regular, read_text_file, MAX_SPEC_BYTES};
pub use threept::{read_threept, read_threept_from};
pub use twopt::{read_twopt, read_twopt_from};
pub use write::{write_threept, write_twopt};

use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use std::path::Path;

/// Choices of the caller of [`read_dataset`].
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct ReadOptions {
    /// Keep only the configurations present in both tables (the others are listed in
    /// [`Dataset::dropped_configs`]) instead of refusing tables that differ.
    pub keep_common_configs: bool,
}

/// The two tables of an ensemble on a common list of configurations.
#[derive(Clone, Debug, PartialEq)]
pub struct Dataset {
    /// The two-point table.
    pub twopt: TwoPointData,
    /// The three-point table, if one was given.
    pub threept: Option<ThreePointData>,
    /// Configurations dropped because only one table had them (ascending).
    pub dropped_configs: Vec<i64>,
    /// What the reader did beyond plain reading (source averaging, dropped configurations),
    /// one sentence each, for the run log.
    pub notes: Vec<String>,
    /// SHA-256 digests of the tables computed while reading them (empty for other sources).
    pub digests: Vec<FileDigest>,
}

/// Read the two-point table and, optionally, the three-point table of one ensemble and check
/// that they cover the same configurations (see [`ReadOptions`]).
pub fn read_dataset(twopt: &Path, threept: Option<&Path>, opts: &ReadOptions) -> Result<Dataset> {
    if threept == Some(Path::new("-")) && twopt == Path::new("-") {
        return Err(Error::config(
            "both tables are `-`: only one of them can come from standard input",
        ));
    }
    let mut notes = Vec::new();
    // One table after the other. Reading them side by side on two threads can save at most
    // the two-point table's share of the read's wall time (about a quarter of the bytes),
    // but it raised the peak memory of a `--jobs 2` run by a quarter (the allocator's
    // per-thread arenas keep what the second thread freed).
    let (two, summary, two_digest) = twopt::read_hashed(twopt)?;
    notes.push(read_note(
        twopt,
        &summary,
        two.channels.len(),
        two.configs.len(),
    ));
    notes.extend(source_note(twopt, &summary));
    let Some(threept_path) = threept else {
        return Ok(Dataset {
            twopt: two,
            threept: None,
            dropped_configs: Vec::new(),
            notes,
            digests: vec![two_digest],
        });
    };
    let (three, summary, three_digest) = threept::read_hashed(threept_path)?;
    notes.push(read_note(
        threept_path,
        &summary,
        three.channels.len(),
        three.configs.len(),
    ));
    notes.extend(source_note(threept_path, &summary));
    let mut ds = on_common_configs(two, twopt, three, threept_path, notes, opts)?;
    ds.digests = vec![two_digest, three_digest];
    Ok(ds)
}

/// Put two- and three-point data read from `twopt` and `threept` (names for messages) on
/// common configurations: identical lists pass, different ones are refused unless
/// [`ReadOptions::keep_common_configs`] is set (then the others are dropped and listed).
/// The same rule for every data source (CSV tables, HDF5 files).
pub fn on_common_configs(
    mut two: TwoPointData,
    twopt: &Path,
    mut three: ThreePointData,
    threept_path: &Path,
    mut notes: Vec<String>,
    opts: &ReadOptions,
) -> Result<Dataset> {
    let mut dropped_configs = Vec::new();
    if two.configs != three.configs {
        let only_two = difference(&two.configs, &three.configs);
        let only_three = difference(&three.configs, &two.configs);
        let common = difference(&two.configs, &only_two);
        let first = |v: &[i64]| {
            v.first()
                .map_or(String::new(), |c| format!(" (first: {c})"))
        };
        let what = format!(
            "{} has {} configuration(s) missing from {}{}, and {} has {} missing from {}{}",
            twopt.display(),
            only_two.len(),
            threept_path.display(),
            first(&only_two),
            threept_path.display(),
            only_three.len(),
            twopt.display(),
            first(&only_three),
        );
        if !opts.keep_common_configs {
            return Err(Error::Table {
                path: threept_path.to_path_buf(),
                message: format!(
                    "the two tables cover different configurations: {what}; set `data.keep_common_configs: \
                     true` in the pipeline to keep only the {} common configurations",
                    common.len()
                ),
            });
        }
        if common.is_empty() {
            return Err(Error::Table {
                path: threept_path.to_path_buf(),
                message: format!("the two tables have no configuration in common: {what}"),
            });
        }
        two = TwoPointData {
            channels: two
                .channels
                .iter()
                .map(|(k, s)| (k.clone(), select_configs(s, &two.configs, &common)))
                .collect(),
            configs: common.clone(),
        };
        three = ThreePointData {
            channels: three
                .channels
                .iter()
                .map(|(k, s)| (k.clone(), select_configs(s, &three.configs, &common)))
                .collect(),
            configs: common,
        };
        dropped_configs = only_two;
        dropped_configs.extend(only_three);
        dropped_configs.sort_unstable();
        notes.push(format!(
            "kept the {} configurations common to both tables and dropped {}: {:?}",
            two.configs.len(),
            dropped_configs.len(),
            dropped_configs
        ));
    }
    Ok(Dataset {
        twopt: two,
        threept: Some(three),
        dropped_configs,
        notes,
        digests: Vec::new(),
    })
}

fn read_note(path: &Path, s: &accumulator::Summary, channels: usize, configs: usize) -> String {
    format!(
        "{}: read {} rows into {channels} channels on {configs} configurations",
        path.display(),
        s.rows
    )
}

fn source_note(path: &Path, s: &accumulator::Summary) -> Option<String> {
    let (lo, hi) = s.sources?;
    Some(if lo == hi {
        format!(
            "{}: averaged {lo} source(s) per configuration and data point",
            path.display()
        )
    } else {
        format!(
            "{}: averaged between {lo} and {hi} sources per configuration and data point",
            path.display()
        )
    })
}

/// Elements of ascending `a` not in ascending `b`.
fn difference(a: &[i64], b: &[i64]) -> Vec<i64> {
    a.iter()
        .copied()
        .filter(|c| b.binary_search(c).is_err())
        .collect()
}

/// The columns of `s` (on `configs`) belonging to `keep` (an ascending subset of `configs`).
fn select_configs(s: &Series, configs: &[i64], keep: &[i64]) -> Series {
    let cols: Vec<usize> = keep
        .iter()
        .filter_map(|c| configs.binary_search(c).ok())
        .collect();
    let mut out = Series::zeros(s.n_t, cols.len());
    for t in 0..s.n_t {
        for (j, &i) in cols.iter().enumerate() {
            out.re[t * cols.len() + j] = s.re[s.index(t, i)];
            out.im[t * cols.len() + j] = s.im[s.index(t, i)];
        }
    }
    out
}

/// A human-readable name of a two-point channel, for messages.
pub fn describe_twopt(key: &TwoPointKey) -> String {
    let p = key.momentum;
    let mut s = format!("p=({},{},{})", p[0], p[1], p[2]);
    if let Some(smear) = &key.smear {
        s.push_str(&format!(" smear={smear}"));
    }
    if let Some(o) = &key.ops {
        s.push_str(&format!(" ops={o}"));
    }
    s
}

/// A human-readable name of a three-point channel, for messages.
pub fn describe_threept(key: &ThreePointKey) -> String {
    let mut s = format!(
        "tsep={} pf=({},{},{}) q=({},{},{}) {} {}",
        key.tsep,
        key.pf[0],
        key.pf[1],
        key.pf[2],
        key.q[0],
        key.q[1],
        key.q[2],
        key.current,
        key.projector
    );
    if let Some(f) = &key.flavor {
        s.push_str(&format!(" flavor={f}"));
    }
    if let Some(d) = key.diagram {
        s.push_str(match d {
            crate::data::Diagram::Connected => " connected",
            crate::data::Diagram::Disconnected => " disconnected",
        });
    }
    if let Some(o) = &key.ops {
        s.push_str(&format!(" ops={o}"));
    }
    s
}

/// Largest time value (`t`, `tsep`, `tau`) the reader accepts: far beyond any lattice in use,
/// small enough that a corrupt field cannot exhaust memory.
pub const MAX_TIME: u32 = 1 << 16;

//! Readers and writers for the correlator exchange format (`/work/shared/data-format.md`).
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
//! to the same data.

pub mod inspect;
mod write;

pub use write::{write_threept, write_twopt};

use crate::data::{ThreePointKey, TwoPointKey};

/// A human-readable name of a two-point channel, for messages.
pub fn describe_twopt(key: &TwoPointKey) -> String {
    let p = key.momentum;
    match &key.smear {
        Some(s) => format!("p=({},{},{}) smear={s}", p[0], p[1], p[2]),
        None => format!("p=({},{},{})", p[0], p[1], p[2]),
    }
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
    s
}

/// Largest time value (`t`, `tsep`, `tau`) the reader accepts: far beyond any lattice in use,
/// small enough that a corrupt field cannot exhaust memory.
pub const MAX_TIME: u32 = 1 << 16;

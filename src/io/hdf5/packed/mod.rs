//! The packed ensemble file: every correlator of an ensemble in a few large contiguous
//! datasets with the configuration as an axis, so that reading it costs a handful of library
//! calls and runs at disk-cache speed (per-dataset overhead, not bytes, dominates reading
//! many small HDF5 datasets).
//!
//! Layout (version 1):
//! - `/formfactory`: UTF-8 JSON bytes (`u8`) with `format`, `version` and the channel keys
//!   in order (`twopt`, `threept`);
//! - `/configs`: `i64[n_cfg]`, ascending;
//! - `/twopt/re`, `/twopt/im`: `f64[n_channels, T, n_cfg]`;
//! - `/threept/tsep{N}/re`, `/threept/tsep{N}/im`: `f64[n_channels, N + 1, n_cfg]`, one
//!   group per `tsep`, channels in key order.
//!
//! The time-major, configuration-contiguous order is that of [`crate::data::Series`], so a
//! channel is one contiguous run of each dataset and is read straight into its series
//! ([`values`]). `write.rs` writes the layout, `read.rs` checks and reads it.

mod read;
mod values;
mod write;

pub use read::{read_packed, visit_packed};
pub use write::write_packed;

use crate::data::{ThreePointKey, TwoPointKey};
use serde::{Deserialize, Serialize};

/// The `format` value of the index.
const FORMAT: &str = "formfactory-packed";
/// The layout version written and read.
const VERSION: u32 = 1;

/// The `/formfactory` dataset: what the file is and the channel keys in dataset order.
#[derive(Serialize, Deserialize)]
struct Index {
    format: String,
    version: u32,
    twopt: Vec<TwoPointKey>,
    threept: Vec<ThreePointKey>,
}

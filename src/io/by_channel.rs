//! A CSV table read one channel at a time, for the commands that only summarise or check
//! the data (`inspect`, `check`): memory does not grow with the table.
//!
//! A table grouped by channel (every writer writes them so) is read once, each channel handed
//! over when the next begins (`accumulator/grouped.rs`). A table whose channel reappears
//! after another, and standard input, are read whole as before and then handed over channel
//! by channel, so every table gives what the whole read gives: the same channels, values,
//! configurations, row counts and errors.

use super::accumulator::Summary;
use super::table::{display_name, open};
use super::{threept, twopt};
use crate::data::{Series, ThreePointKey, TwoPointKey};
use crate::error::Result;
use std::collections::BTreeMap;
use std::path::Path;

/// What a table read channel by channel gave: the state the channels were fed into, the
/// table's configurations (ascending) and the summary of its rows.
pub struct ByChannel<S> {
    /// What the caller's `add` made of the channels.
    pub state: S,
    /// The configurations, ascending.
    pub configs: Vec<i64>,
    pub(crate) summary: Summary,
}

/// Read the two-point table `path` (`-` for standard input) channel by channel: `init`
/// makes the state, `add` feeds it each channel (any order; a table that is not grouped
/// starts again from a fresh state). Errors are those of [`super::read_twopt`].
pub fn twopt_by_channel<S>(
    path: &Path,
    init: impl Fn() -> S,
    mut add: impl FnMut(&mut S, &TwoPointKey, &mut Series) -> Result<()>,
) -> Result<ByChannel<S>> {
    let mut state = init();
    if path != Path::new("-") {
        let mut visit = |k: &TwoPointKey, s: &mut Series| add(&mut state, k, s);
        if let Some((configs, summary)) =
            twopt::read_grouped(open(path)?, display_name(path), &mut visit)?
        {
            return Ok(ByChannel {
                state,
                configs,
                summary,
            });
        }
        state = init();
    }
    let (data, summary) = twopt::read_with_summary(path)?;
    feed(&mut state, data.channels, &mut add)?;
    Ok(ByChannel {
        state,
        configs: data.configs,
        summary,
    })
}

/// Read the three-point table `path` channel by channel, as [`twopt_by_channel`]; errors are
/// those of [`super::read_threept`].
pub fn threept_by_channel<S>(
    path: &Path,
    init: impl Fn() -> S,
    mut add: impl FnMut(&mut S, &ThreePointKey, &mut Series) -> Result<()>,
) -> Result<ByChannel<S>> {
    let mut state = init();
    if path != Path::new("-") {
        let mut visit = |k: &ThreePointKey, s: &mut Series| add(&mut state, k, s);
        if let Some((configs, summary)) =
            threept::read_grouped(open(path)?, display_name(path), &mut visit)?
        {
            return Ok(ByChannel {
                state,
                configs,
                summary,
            });
        }
        state = init();
    }
    let (data, summary) = threept::read_with_summary(path)?;
    feed(&mut state, data.channels, &mut add)?;
    Ok(ByChannel {
        state,
        configs: data.configs,
        summary,
    })
}

/// Hand every channel of a table read whole to `add`, freeing each once it is seen.
fn feed<K, S>(
    state: &mut S,
    channels: BTreeMap<K, Series>,
    add: &mut impl FnMut(&mut S, &K, &mut Series) -> Result<()>,
) -> Result<()> {
    for (k, mut s) in channels {
        add(state, &k, &mut s)?;
    }
    Ok(())
}

//! The accumulator of the CSV readers: it interns channels and configurations, averages
//! sources, detects duplicate rows and, at the end, checks that every channel has every
//! time slice for every configuration. Its memory follows the rows it has seen; a grouped
//! read (`grouped.rs`) hands each channel over when the next begins and keeps none.

mod grouped;

pub(crate) use grouped::Visit;

use crate::error::{Error, Location, Result};
use rayon::prelude::*;
use std::collections::{HashMap, HashSet};

/// Sum of the rows seen for one (channel, time, configuration): 16 bytes, the size of the
/// values it becomes, so the read holds no more than twice the table's values. A cell no row
/// has reached holds [`Cell::EMPTY`] in `re`; how many rows a cell holds beyond the first is
/// kept aside (the channel's `extra_rows`), which only tables with a `source` column have.
#[derive(Clone, Copy)]
struct Cell {
    re: f64,
    im: f64,
}

impl Cell {
    /// A signalling NaN with its own payload: parsing never gives one and arithmetic turns
    /// any NaN into a quiet one, so no sum of data equals it bit for bit.
    const EMPTY: u64 = 0x7ff0_0000_dead_0001;

    fn is_empty(&self) -> bool {
        self.re.to_bits() == Self::EMPTY
    }
}

impl Default for Cell {
    fn default() -> Self {
        Cell {
            re: f64::from_bits(Self::EMPTY),
            im: 0.0,
        }
    }
}

/// Cells of one channel: `cells[t][cfg]`, configurations in first-seen order. The dense
/// part grows with the rows the channel has seen (at most [`Channel::dense_limit`] time
/// slices), so a few rows at a huge time cannot make the reader allocate memory out of
/// proportion to the file; a row beyond it waits in `overflow` until the dense part reaches it.
struct Channel {
    cells: Vec<Vec<Cell>>,
    overflow: HashMap<(u32, u32), Cell>,
    rows: usize,
    first_line: u64,
    /// `(t, cfg, source)` seen, when the table has a `source` column.
    sources: HashSet<(u32, u32, i64)>,
    /// Rows beyond the first averaged into a `(t, cfg)` (sources).
    extra_rows: HashMap<(u32, u32), u32>,
}

impl Channel {
    fn new(first_line: u64) -> Self {
        Channel {
            cells: Vec::new(),
            overflow: HashMap::new(),
            rows: 0,
            first_line,
            sources: HashSet::new(),
            extra_rows: HashMap::new(),
        }
    }

    /// The number of rows averaged into the cell `(t, cfg)`.
    fn count(&self, t: usize, cfg: usize) -> u32 {
        match self.extra_rows.is_empty() {
            true => 1,
            false => 1 + self.extra_rows.get(&(t as u32, cfg as u32)).unwrap_or(&0),
        }
    }

    /// Time slices the dense part may span after `rows` rows.
    fn dense_limit(rows: usize) -> usize {
        2 * rows + 1024
    }

    /// The cell of `(t, cfg)`, growing the dense part when the channel's row count allows.
    fn cell(&mut self, t: u32, cfg: u32) -> &mut Cell {
        self.rows += 1;
        let t_us = t as usize;
        if t_us >= self.cells.len() && t_us < Self::dense_limit(self.rows) {
            self.cells.resize_with(t_us + 1, Vec::new);
            let len = self.cells.len() as u32;
            let moved: Vec<_> = self
                .overflow
                .keys()
                .filter(|(t, _)| *t < len)
                .copied()
                .collect();
            for key in moved {
                if let Some(cell) = self.overflow.remove(&key) {
                    let row = &mut self.cells[key.0 as usize];
                    if row.len() <= key.1 as usize {
                        row.resize(key.1 as usize + 1, Cell::default());
                    }
                    row[key.1 as usize] = cell;
                }
            }
        }
        match self.cells.get_mut(t_us) {
            Some(row) => {
                if row.len() <= cfg as usize {
                    row.resize(cfg as usize + 1, Cell::default());
                }
                &mut row[cfg as usize]
            }
            None => self.overflow.entry((t, cfg)).or_default(),
        }
    }

    /// The cell of `(t, cfg)` if any row gave it.
    fn get(&self, t: usize, cfg: usize) -> Option<Cell> {
        match self.cells.get(t) {
            Some(row) => row.get(cfg).copied(),
            None => self.overflow.get(&(t as u32, cfg as u32)).copied(),
        }
    }

    /// Append the averaged values of time slices `0..n_t`, time-major, configurations in the
    /// order of `sorted` (`(number, first-seen index)`), to `re` and `im`, widening `counts`
    /// (fewest, most rows averaged into one value) by each cell's; stops at the first empty
    /// cell, whose `(t, configuration number)` it returns.
    fn average_into(
        &self,
        n_t: usize,
        sorted: &[(i64, usize)],
        (re, im): (&mut Vec<f64>, &mut Vec<f64>),
        counts: &mut (u32, u32),
    ) -> Option<(usize, i64)> {
        for t in 0..n_t {
            for &(config, i) in sorted {
                let cell = self.get(t, i).unwrap_or_default();
                if cell.is_empty() {
                    return Some((t, config));
                }
                let count = self.count(t, i);
                counts.0 = counts.0.min(count);
                counts.1 = counts.1.max(count);
                let n = f64::from(count);
                re.push(cell.re / n);
                im.push(cell.im / n);
            }
        }
        None
    }
}

/// Collects rows into channels and checks the one-row-per-point rule.
pub(crate) struct Accumulator {
    ids: HashMap<Vec<u8>, u32>,
    channels: Vec<Channel>,
    cfg_ids: HashMap<i64, u32>,
    /// Configuration numbers in first-seen order.
    configs: Vec<i64>,
    last_cfg: u32,
    /// Whether the table has a `source` column (rows of one point are then averaged).
    with_source: bool,
    rows: u64,
    /// The state of a grouped read ([`Accumulator::grouped`]), `None` when every channel is
    /// kept to the end.
    grouped: Option<grouped::Grouped>,
}

/// What became of the rows: source averaging and counts.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Summary {
    /// Number of data rows read.
    pub rows: u64,
    /// Smallest and largest number of sources averaged into one value.
    pub sources: Option<(u32, u32)>,
}

/// A completed channel: its values in ascending configuration order.
pub(crate) struct Finished {
    pub configs: Vec<i64>,
    /// Per channel id: `(re, im)` time-major, configurations contiguous.
    pub values: Vec<(Vec<f64>, Vec<f64>)>,
    pub summary: Summary,
}

impl Accumulator {
    /// An accumulator that keeps every channel until [`Accumulator::finish`].
    pub fn new(with_source: bool) -> Self {
        Accumulator {
            ids: HashMap::new(),
            channels: Vec::new(),
            cfg_ids: HashMap::new(),
            configs: Vec::new(),
            last_cfg: 0,
            with_source,
            rows: 0,
            grouped: None,
        }
    }

    /// The channel id of an encoded key, if known.
    pub fn channel(&self, key: &[u8]) -> Option<u32> {
        self.ids.get(key).copied()
    }

    /// Register a new channel under an encoded key; returns its id.
    pub fn add_channel(&mut self, key: &[u8], line: u64) -> u32 {
        let id = self.channels.len() as u32;
        self.ids.insert(key.to_vec(), id);
        self.channels.push(Channel::new(line));
        if let Some(g) = &mut self.grouped {
            g.opened(id);
        }
        id
    }

    fn config_index(&mut self, config: i64) -> u32 {
        let n = self.configs.len() as u32;
        // Tables are usually written with configurations cycling in a fixed order.
        for guess in [self.last_cfg, self.last_cfg + 1, 0] {
            if guess < n && self.configs[guess as usize] == config {
                self.last_cfg = guess;
                return guess;
            }
        }
        let idx = *self.cfg_ids.entry(config).or_insert(n);
        if idx == n {
            self.configs.push(config);
        }
        self.last_cfg = idx;
        idx
    }

    /// Add one row. `describe` names the data point in a duplicate message.
    #[allow(clippy::too_many_arguments)]
    pub fn add(
        &mut self,
        id: u32,
        t: u32,
        config: i64,
        source: Option<i64>,
        re: f64,
        im: f64,
        location: impl FnOnce() -> Location,
        describe: impl FnOnce() -> String,
    ) -> Result<()> {
        self.rows += 1;
        if let Some(g) = &mut self.grouped {
            if !g.continues(id) {
                return Err(grouped::reappeared(location()));
            }
        }
        let cfg = self.config_index(config);
        let chan = &mut self.channels[id as usize];
        let new_source = match (self.with_source, source) {
            (true, Some(s)) => Some(chan.sources.insert((t, cfg, s))),
            _ => None,
        };
        let cell = chan.cell(t, cfg);
        let duplicate = match new_source {
            Some(new) => !new,
            None => !cell.is_empty(),
        };
        if duplicate {
            let what = match source {
                Some(s) => format!(" and source {s}"),
                None => String::new(),
            };
            return Err(Error::Data {
                location: location(),
                message: format!(
                    "duplicate row: {} at configuration {config}{what} was already given",
                    describe()
                ),
            });
        }
        if cell.is_empty() {
            *cell = Cell { re, im };
        } else {
            cell.re += re;
            cell.im += im;
            *chan.extra_rows.entry((t, cfg)).or_insert(0) += 1;
        }
        Ok(())
    }

    /// Check completeness and average. `order` lists channel ids in key order, `n_t` gives
    /// each channel's number of time slices, `missing` builds the error for the first gap
    /// `(channel, t, config, first line of the channel)`.
    pub fn finish(
        mut self,
        order: &[u32],
        n_t: impl Fn(u32) -> usize + Sync,
        missing: impl Fn(u32, usize, i64, u64) -> Error + Sync,
    ) -> Result<Finished> {
        // The duplicate check is done; its sets (one entry per row) go before the values grow.
        for chan in &mut self.channels {
            chan.sources = HashSet::new();
        }
        let sorted = sorted_configs(&self.configs);
        let n_cfg = sorted.len();
        let mut slots: Vec<Option<Channel>> = std::mem::take(&mut self.channels)
            .into_iter()
            .map(Some)
            .collect();
        let in_order: Vec<(u32, Channel)> = order
            .iter()
            .filter_map(|&id| Some((id, slots.get_mut(id as usize)?.take()?)))
            .collect();
        // Channels in parallel, each alone (the same values whatever the threads); each
        // channel's cells are released once its values are out, so the cells and the values
        // of the whole table are never held at once. The first gap in `order` is reported,
        // as a loop over the channels would.
        let done: Vec<Result<Averaged>> = in_order
            .into_par_iter()
            .map(|(id, chan)| {
                let nt = n_t(id);
                // Reserve only once the channel is known to reach its last time slice, so a
                // corrupt time value cannot trigger a huge allocation before the gap is found.
                let cap = if chan.cells.len() == nt {
                    nt * n_cfg
                } else {
                    0
                };
                let mut re = Vec::with_capacity(cap);
                let mut im = Vec::with_capacity(cap);
                let mut counts = (u32::MAX, 0u32);
                if let Some((t, config)) =
                    chan.average_into(nt, &sorted, (&mut re, &mut im), &mut counts)
                {
                    return Err(missing(id, t, config, chan.first_line));
                }
                let (smin, smax) = counts;
                Ok(Averaged {
                    id,
                    re,
                    im,
                    smin,
                    smax,
                })
            })
            .collect();
        let mut values: Vec<(Vec<f64>, Vec<f64>)> = vec![(Vec::new(), Vec::new()); slots.len()];
        let (mut smin, mut smax) = (u32::MAX, 0u32);
        for channel in done {
            let c = channel?;
            smin = smin.min(c.smin);
            smax = smax.max(c.smax);
            values[c.id as usize] = (c.re, c.im);
        }
        Ok(Finished {
            configs: sorted.into_iter().map(|(c, _)| c).collect(),
            values,
            summary: self.summary(smin, smax),
        })
    }

    /// The summary of the rows read, `smin` and `smax` the extremes of the rows averaged per
    /// value.
    fn summary(&self, smin: u32, smax: u32) -> Summary {
        Summary {
            rows: self.rows,
            sources: self.with_source.then(|| (smin.min(smax), smax)),
        }
    }
}

/// One channel's values from [`Accumulator::finish`], with the fewest and most rows averaged
/// into one of them.
struct Averaged {
    id: u32,
    re: Vec<f64>,
    im: Vec<f64>,
    smin: u32,
    smax: u32,
}

/// The configurations `(number, first-seen index)` in ascending order of number.
fn sorted_configs(configs: &[i64]) -> Vec<(i64, usize)> {
    let mut sorted: Vec<(i64, usize)> = configs.iter().enumerate().map(|(i, &c)| (c, i)).collect();
    sorted.sort_unstable();
    sorted
}

/// Channel ids `0..keys.len()` ordered by their keys, the order of the output map.
pub(crate) fn key_order<K: Ord>(keys: &[K]) -> Vec<u32> {
    let mut order: Vec<u32> = (0..keys.len() as u32).collect();
    order.sort_by(|&a, &b| keys[a as usize].cmp(&keys[b as usize]));
    order
}

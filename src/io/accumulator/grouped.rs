//! The grouped read: a table whose rows come channel after channel (as every writer writes
//! them) is handed over one channel at a time, so `inspect` and `check` hold one channel's
//! values, not the table's.
//!
//! A channel is closed when a batch of rows ends and its rows are over (every channel
//! opened since the last close but the one of the batch's last row): its values are averaged
//! and handed to a visitor, and its cells are freed. A row of a channel already closed makes
//! the read stop ([`Accumulator::reappeared`]); the caller then reads the table whole.
//!
//! Completeness is still decided at the end of the table, against the configurations of
//! every channel and (two-point) the table's `T`, and reported as the whole read reports it:
//! the first gap in key order, time-major, configurations ascending. What a closed channel
//! leaves for that ([`Closed`]: the configurations known when it closed, its first gap among
//! them, its time extent) is enough to find its first gap against the final lists: a
//! configuration first seen after the channel closed is missing from it at every time, so
//! its first gap is then at `t = 0`.

use super::{sorted_configs, Accumulator, Channel, Summary};
use crate::data::Series;
use crate::error::{Error, Location, Result};

/// What sees each channel of a grouped read: its channel id (or key, one level up) and its
/// values, configurations ascending; the series is the read's buffer, reused for the next
/// channel.
pub(crate) type Visit<'a, K> = &'a mut dyn FnMut(&K, &mut Series) -> Result<()>;

/// What a closed channel leaves for the completeness check at the end of the table.
#[derive(Clone, Copy)]
struct Closed {
    /// How many configurations were known when it closed (a prefix of the first-seen list).
    known: usize,
    /// Its first missing `(t, configuration)` among those, in the order of the whole read.
    gap: Option<(usize, i64)>,
    /// Time slices its rows reached (largest time + 1).
    n_t: usize,
    first_line: u64,
}

impl Closed {
    /// The channel's first missing `(t, configuration)` once the table is read: `later` is
    /// the smallest configuration first seen after the channel closed, `n_t` its number of
    /// time slices, `first` the smallest configuration of the table.
    fn first_missing(&self, later: Option<i64>, n_t: usize, first: i64) -> Option<(usize, i64)> {
        let at_zero = match self.gap {
            Some((0, config)) => Some(config),
            _ => None,
        };
        match (at_zero, later) {
            (Some(a), Some(b)) => Some((0, a.min(b))),
            (Some(c), None) | (None, Some(c)) => Some((0, c)),
            (None, None) => self
                .gap
                .or_else(|| (self.n_t < n_t).then_some((self.n_t, first))),
        }
    }
}

/// The state of a grouped read.
pub(super) struct Grouped {
    /// Per channel id: what it left when it closed, `None` while it is open.
    closed: Vec<Option<Closed>>,
    /// Channels opened since the last close, in first-seen order.
    open: Vec<u32>,
    /// The channel of the last row.
    last: u32,
    /// Set when a row came for a closed channel.
    reappeared: bool,
    /// The known configurations, ascending (refreshed when more are known).
    sorted: Vec<(i64, usize)>,
    /// Smallest and largest number of rows averaged into one value of the closed channels.
    counts: (u32, u32),
    /// The buffer every closing channel's values are written into.
    series: Series,
}

impl Grouped {
    /// A channel got its first row.
    pub(super) fn opened(&mut self, id: u32) {
        self.closed.push(None);
        self.open.push(id);
    }

    /// Take a row of channel `id`: `false` (and the read stops) when the channel is closed.
    pub(super) fn continues(&mut self, id: u32) -> bool {
        if self.closed[id as usize].is_some() {
            self.reappeared = true;
            return false;
        }
        self.last = id;
        true
    }
}

/// The error that stops a grouped read at a row of a closed channel. The readers do not
/// report it: the caller reads the table whole instead (see [`Accumulator::reappeared`]).
pub(super) fn reappeared(location: Location) -> Error {
    Error::Data {
        location,
        message: "the channel of this row was closed before: the table is not grouped by channel"
            .into(),
    }
}

impl Channel {
    /// Time slices the channel's rows reached (largest time + 1).
    fn extent(&self) -> usize {
        let beyond = self.overflow.keys().map(|&(t, _)| t as usize + 1).max();
        beyond.unwrap_or(0).max(self.cells.len())
    }
}

impl Accumulator {
    /// An accumulator for a grouped read: channels are closed by [`Accumulator::close_ready`]
    /// and the table finished by [`Accumulator::finish_grouped`].
    pub fn grouped(with_source: bool) -> Self {
        let mut acc = Accumulator::new(with_source);
        acc.grouped = Some(Grouped {
            closed: Vec::new(),
            open: Vec::new(),
            last: 0,
            reappeared: false,
            sorted: Vec::new(),
            counts: (u32::MAX, 0),
            series: Series::zeros(0, 0),
        });
        acc
    }

    /// Whether a grouped read stopped at a row of a channel it had closed (the table is not
    /// grouped by channel; its rows were not all read).
    pub fn reappeared(&self) -> bool {
        self.grouped.as_ref().is_some_and(|g| g.reappeared)
    }

    /// Close every open channel but the one of the last row (the end of a batch of rows).
    pub fn close_ready(&mut self, visit: Visit<u32>) -> Result<()> {
        self.close_open(false, visit)
    }

    /// Close the open channels (all, or all but the one of the last row): average each
    /// channel's values and hand them to `visit` unless they have a gap (then the table fails
    /// at its end anyway), keep what the completeness check needs, free the cells.
    fn close_open(&mut self, all: bool, visit: Visit<u32>) -> Result<()> {
        let Some(g) = &mut self.grouped else {
            return Ok(());
        };
        let last = g.last;
        let open = std::mem::take(&mut g.open);
        for &id in &open {
            if id == last && !all {
                g.open.push(id);
                continue;
            }
            let chan = std::mem::replace(&mut self.channels[id as usize], Channel::new(0));
            if g.sorted.len() != self.configs.len() {
                g.sorted = sorted_configs(&self.configs);
            }
            let n_t = chan.extent();
            let s = &mut g.series;
            s.re.clear();
            s.im.clear();
            let mut counts = g.counts;
            let gap = chan.average_into(n_t, &g.sorted, (&mut s.re, &mut s.im), &mut counts);
            g.closed[id as usize] = Some(Closed {
                known: g.sorted.len(),
                gap,
                n_t,
                first_line: chan.first_line,
            });
            drop(chan);
            if gap.is_none() {
                g.counts = counts;
                s.n_t = n_t;
                s.n_cfg = g.sorted.len();
                visit(&id, s)?;
            }
        }
        Ok(())
    }

    /// Close the last channels and check completeness as [`Accumulator::finish`] does (the
    /// same first gap, reported by `missing`); returns the configurations, ascending, and
    /// the summary of the rows.
    pub fn finish_grouped(
        mut self,
        order: &[u32],
        n_t: impl Fn(u32) -> usize,
        missing: impl Fn(u32, usize, i64, u64) -> Error,
        visit: Visit<u32>,
    ) -> Result<(Vec<i64>, Summary)> {
        self.close_open(true, visit)?;
        let Some(g) = self.grouped.take() else {
            return Ok((Vec::new(), self.summary(u32::MAX, 0)));
        };
        // later[k]: the smallest configuration first seen at index k or after
        let mut later: Vec<Option<i64>> = vec![None; self.configs.len() + 1];
        for (k, &c) in self.configs.iter().enumerate().rev() {
            later[k] = Some(later[k + 1].map_or(c, |m| m.min(c)));
        }
        let sorted: Vec<i64> = sorted_configs(&self.configs)
            .into_iter()
            .map(|(c, _)| c)
            .collect();
        let first = sorted.first().copied().unwrap_or_default();
        for &id in order {
            let Some(c) = g.closed[id as usize] else {
                continue;
            };
            if let Some((t, config)) = c.first_missing(later[c.known], n_t(id), first) {
                return Err(missing(id, t, config, c.first_line));
            }
        }
        Ok((sorted, self.summary(g.counts.0, g.counts.1)))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn closed(known: usize, gap: Option<(usize, i64)>, n_t: usize) -> Closed {
        Closed {
            known,
            gap,
            n_t,
            first_line: 2,
        }
    }

    /// The first gap of a channel against the table's final configurations, worked out by
    /// hand in the whole read's order (time-major, configurations ascending).
    #[test]
    fn first_missing_follows_the_whole_reads_order() {
        // complete on what it knew, nothing came later, full time extent: complete
        assert_eq!(closed(4, None, 8).first_missing(None, 8, 1), None);
        // a configuration first seen later is missing at t = 0
        assert_eq!(
            closed(4, None, 8).first_missing(Some(7), 8, 1),
            Some((0, 7))
        );
        // a gap at t = 0 among the known ones: the smaller of it and the later one
        assert_eq!(
            closed(4, Some((0, 3)), 8).first_missing(Some(7), 8, 1),
            Some((0, 3))
        );
        assert_eq!(
            closed(4, Some((0, 9)), 8).first_missing(Some(7), 8, 1),
            Some((0, 7))
        );
        // a gap at t = 2 comes after every t = 0 gap
        assert_eq!(
            closed(4, Some((2, 3)), 8).first_missing(Some(7), 8, 1),
            Some((0, 7))
        );
        assert_eq!(
            closed(4, Some((2, 3)), 8).first_missing(None, 8, 1),
            Some((2, 3))
        );
        // a two-point channel shorter than the table's T lacks its first configuration there
        assert_eq!(closed(4, None, 6).first_missing(None, 8, 1), Some((6, 1)));
    }
}

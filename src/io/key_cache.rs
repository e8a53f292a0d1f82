//! The cache that recognises a row continuing the previous row's channel, so that long tables
//! grouped by channel parse their key fields once per channel, not once per row, and the
//! channel keys a batch of rows has met ([`LocalKeys`]).

use super::row::Row;
use crate::error::Result;
use std::collections::HashMap;

/// The raw bytes of a row's key columns, kept so that a row continuing the previous row's
/// channel (the usual case in long tables) skips parsing its key fields again. Key columns
/// that sit side by side in the file are compared as one span of bytes (with their field
/// boundaries), so a row costs one comparison per run of adjacent key columns, not one per
/// field.
#[derive(Default)]
pub(crate) struct KeyCache {
    /// Runs of adjacent key fields, `(first, last)` record indices, set on first use.
    runs: Option<Vec<(usize, usize)>>,
    /// The spans of the remembered row, run after run.
    last: Vec<u8>,
    /// Field ends of the remembered row relative to the start of their run.
    ends: Vec<usize>,
    valid: bool,
    /// Channel id of the remembered row.
    last_id: Option<u32>,
}

impl KeyCache {
    /// The channel id of the current row: the remembered one when its key columns `cols`
    /// repeat those of the previous row (tables are usually grouped by channel), otherwise
    /// `lookup()`'s, which is then remembered. `cols` must be the same on every call.
    pub fn channel_id(
        &mut self,
        rd: &Row,
        cols: &[usize],
        lookup: impl FnOnce() -> Result<u32>,
    ) -> Result<u32> {
        if self.runs.is_none() {
            self.runs = Some(runs(rd, cols));
        }
        if let Some(id) = self.last_id {
            if self.same_as_last(rd) {
                return Ok(id);
            }
        }
        let id = lookup()?;
        self.remember(rd);
        self.last_id = Some(id);
        Ok(id)
    }

    /// Whether the key fields of the current row are byte-identical to those of the
    /// remembered row. Compares in place, without copying.
    fn same_as_last(&self, rd: &Row) -> bool {
        let (Some(runs), true) = (&self.runs, self.valid) else {
            return false;
        };
        let bytes = rd.bytes;
        let (mut at, mut ends) = (0, self.ends.iter());
        for &(a, b) in runs {
            let (Some(first), Some(last)) = (rd.range(a), rd.range(b)) else {
                return false;
            };
            for i in a..=b {
                let end = rd.range(i).map(|r| r.1 - first.0);
                if end != ends.next().copied() {
                    return false;
                }
            }
            let span = &bytes[first.0..last.1];
            if self.last.get(at..at + span.len()) != Some(span) {
                return false;
            }
            at += span.len();
        }
        true
    }

    /// Remember the key fields of the current row.
    fn remember(&mut self, rd: &Row) {
        self.last.clear();
        self.ends.clear();
        self.valid = false;
        let Some(runs) = &self.runs else {
            return;
        };
        for &(a, b) in runs {
            let (Some(first), Some(last)) = (rd.range(a), rd.range(b)) else {
                return;
            };
            for i in a..=b {
                match rd.range(i) {
                    Some(r) => self.ends.push(r.1 - first.0),
                    None => return,
                }
            }
            self.last.extend_from_slice(&rd.bytes[first.0..last.1]);
        }
        self.valid = true;
    }
}

/// The record indices of the schema columns `cols` present in the header, as runs of
/// adjacent indices `(first, last)`.
fn runs(rd: &Row, cols: &[usize]) -> Vec<(usize, usize)> {
    let mut idx: Vec<usize> = cols.iter().filter_map(|&k| rd.header.index[k]).collect();
    idx.sort_unstable();
    idx.dedup();
    let mut out: Vec<(usize, usize)> = Vec::new();
    for i in idx {
        match out.last_mut() {
            Some((_, last)) if *last + 1 == i => *last = i,
            _ => out.push((i, i)),
        }
    }
    out
}

/// The channel keys a batch has met, in first-seen order, each with its byte encoding.
pub(crate) struct LocalKeys<K> {
    pub(super) list: Vec<(K, Vec<u8>)>,
    ids: HashMap<Vec<u8>, u32>,
}

impl<K> Default for LocalKeys<K> {
    fn default() -> Self {
        LocalKeys {
            list: Vec::new(),
            ids: HashMap::new(),
        }
    }
}

impl<K> LocalKeys<K> {
    /// The local index of the key encoded as `enc`, registering `make()` when new.
    pub fn id(&mut self, enc: &[u8], make: impl FnOnce() -> K) -> u32 {
        if let Some(&id) = self.ids.get(enc) {
            return id;
        }
        let id = self.list.len() as u32;
        self.list.push((make(), enc.to_vec()));
        self.ids.insert(enc.to_vec(), id);
        id
    }

    /// The key of local index `id`.
    pub fn get(&self, id: u32) -> &K {
        &self.list[id as usize].0
    }
}

/// Append `label` to a channel-key encoding, length first (so no two label lists share an
/// encoding).
pub(crate) fn push_label(enc: &mut Vec<u8>, label: &str) {
    enc.extend_from_slice(&(label.len() as u32).to_le_bytes());
    enc.extend_from_slice(label.as_bytes());
}

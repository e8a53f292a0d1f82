//! Parallel reading of the CSV tables: the input is cut into blocks at line ends, the blocks
//! are split into fields and parsed on the worker threads, and their rows go into the
//! accumulator on the calling thread in file order, so the result, the first error reported
//! and every number are the same as a row-by-row read, whatever the number of threads.
//!
//! The block splitter takes plain CSV (no quote characters, lines ending in `\n` or `\r\n`),
//! which is what contraction codes and the writers of this crate produce. From the first block
//! that is not plain (a quoted field may hold a line end, a lone `\r` ends a line), the rest of
//! the table goes through the general CSV reader of `table.rs` instead.

use super::accumulator::Accumulator;
use super::key_cache::KeyCache;
pub(crate) use super::key_cache::{push_label, LocalKeys};
use super::row::{Header, ParsedRow, Row};
use super::table::{Column, TableReader};
use crate::error::{Error, Location, Result};
use rayon::prelude::*;
use std::io::{Chain, Cursor, Read};
use std::path::{Path, PathBuf};

/// Bytes per block (a block ends at the last line end within it).
const BLOCK: usize = 1 << 20;
/// Blocks read ahead and parsed together.
const BATCH: usize = 4;
/// Rows per batch on the general CSV path.
const CSV_BATCH: usize = 1 << 16;

/// A table's row parser, run on any thread.
pub(crate) trait RowParser: Sync {
    /// The channel key.
    type Key: Send + Clone;
    /// Parse one row; its key goes into `keys` (through `cache` when it repeats).
    fn parse(
        &self,
        row: &Row,
        cache: &mut KeyCache,
        keys: &mut LocalKeys<Self::Key>,
    ) -> Result<ParsedRow>;
}

/// The rows of a stretch of the table, parsed; `error` is the first row that failed (the rows
/// before it are in `rows`).
pub(crate) struct Batch<K> {
    pub keys: LocalKeys<K>,
    pub rows: Vec<ParsedRow>,
    pub error: Option<Error>,
}

impl<K: Clone> Batch<K> {
    /// Add the rows to `acc` in order, registering new channels in `keys` (global ids are
    /// indices into `keys`); then the batch's parse error, if any. `describe` names a data
    /// point in a duplicate message.
    pub fn merge(
        self,
        acc: &mut Accumulator,
        keys: &mut Vec<K>,
        header: &Header,
        describe: impl Fn(&K, u32) -> String,
    ) -> Result<()> {
        let mut global: Vec<Option<u32>> = vec![None; self.keys.list.len()];
        for r in &self.rows {
            let id = match global[r.key as usize] {
                Some(id) => id,
                None => {
                    let (k, enc) = &self.keys.list[r.key as usize];
                    let id = match acc.channel(enc) {
                        Some(id) => id,
                        None => {
                            keys.push(k.clone());
                            acc.add_channel(enc, r.line)
                        }
                    };
                    global[r.key as usize] = Some(id);
                    id
                }
            };
            acc.add(
                id,
                r.t,
                r.config,
                r.source,
                r.re,
                r.im,
                || Location {
                    file: header.file.clone(),
                    line: r.line,
                    column: None,
                    field: None,
                },
                || describe(&keys[id as usize], r.t),
            )?;
        }
        match self.error {
            Some(e) => Err(e),
            None => Ok(()),
        }
    }
}

/// A block of whole lines, the line number of its first, and room for its parsed rows
/// (allocated by the reading thread, so the workers' allocator arenas stay small).
struct Block {
    /// The block is `bytes[..len]` (the storage may be longer, reused from earlier blocks).
    bytes: Vec<u8>,
    len: usize,
    first_line: u64,
    rows: Vec<ParsedRow>,
}

/// The data rows of a table after its header.
pub(crate) enum Rows<R: Read> {
    /// Plain CSV so far: blocks still to cut from `input` (`carry` is the start of a line).
    Blocks {
        input: R,
        carry: Vec<u8>,
        next_line: u64,
        /// Buffers of parsed blocks, filled again by the next blocks (no fresh memory, and
        /// no growth while a block is read).
        free: Vec<Vec<u8>>,
    },
    /// The general CSV reader.
    Csv(Box<TableReader<Chain<Cursor<Vec<u8>>, R>>>),
    /// Passing from blocks to the general reader (never seen outside [`Rows::read_batch`]).
    Taken,
}

/// Read the header of the table in `input` (`file` names it) and map it onto `schema`.
pub(crate) fn open_rows<R: Read>(
    mut input: R,
    file: PathBuf,
    schema: &[Column],
) -> Result<(Header, Rows<R>)> {
    let mut first = Vec::new();
    let mut eof = false;
    let newline = loop {
        if let Some(nl) = memchr::memchr(b'\n', &first) {
            break Some(nl);
        }
        if eof {
            break None;
        }
        eof = fill(&mut input, &mut first, BLOCK, &file)?;
    };
    let plain_header = newline.and_then(|nl| {
        let line = strip_cr(&first[..nl]);
        (!line.is_empty() && is_plain(&first[..=nl])).then_some(nl)
    });
    match plain_header {
        Some(nl) => {
            let line = strip_cr(&first[..nl]);
            let header = Header::map(line.split(|&b| b == b','), file, schema)?;
            let carry = first[nl + 1..].to_vec();
            Ok((
                header,
                Rows::Blocks {
                    input,
                    carry,
                    next_line: 2,
                    free: Vec::new(),
                },
            ))
        }
        None => {
            let (rd, header) = TableReader::new(Cursor::new(first).chain(input), file, schema)?;
            Ok((header, Rows::Csv(Box::new(rd))))
        }
    }
}

impl<R: Read> Rows<R> {
    /// Parse every row with `parser` (in parallel where the table is plain CSV) and hand the
    /// batches to `merge` in file order; stops at the first error.
    pub fn for_each_batch<P: RowParser>(
        self,
        header: &Header,
        parser: &P,
        mut merge: impl FnMut(Batch<P::Key>) -> Result<()>,
    ) -> Result<()> {
        let mut rows = self;
        let mut pending = rows.read_batch(header)?;
        // Three batches in flight: while the workers parse one, the calling thread merges the
        // one parsed before it and then reads the next. Merges stay in file order, and an
        // error of an earlier batch is reported before a read error of a later one.
        let mut parsed: Vec<Batch<P::Key>> = Vec::new();
        while !pending.is_empty() {
            let mut fresh: Vec<(Batch<P::Key>, Vec<u8>)> = Vec::new();
            let mut merged = Ok(());
            let mut next = Ok(Vec::new());
            rayon::in_place_scope(|s| {
                s.spawn(|_| {
                    fresh = pending
                        .into_par_iter()
                        .map(|b| parse_block(b, header, parser))
                        .collect();
                });
                merged = parsed.drain(..).try_for_each(&mut merge);
                if merged.is_ok() {
                    next = rows.read_batch(header);
                }
            });
            merged?;
            parsed = Vec::with_capacity(fresh.len());
            for (batch, buffer) in fresh {
                parsed.push(batch);
                if let Rows::Blocks { free, .. } = &mut rows {
                    free.push(buffer);
                }
            }
            match next {
                Ok(blocks) => pending = blocks,
                Err(e) => {
                    parsed.into_iter().try_for_each(&mut merge)?;
                    return Err(e);
                }
            }
        }
        parsed.into_iter().try_for_each(&mut merge)?;
        if let Rows::Csv(mut rd) = rows {
            loop {
                let batch = csv_batch(&mut rd, header, parser);
                let last = batch.rows.len() < CSV_BATCH || batch.error.is_some();
                merge(batch)?;
                if last {
                    return Ok(());
                }
            }
        }
        Ok(())
    }

    /// Up to [`BATCH`] plain blocks; at the first block that is not plain the rows switch to
    /// the general reader (starting at that block) and the blocks before it are returned.
    fn read_batch(&mut self, header: &Header) -> Result<Vec<Block>> {
        let mut out = Vec::with_capacity(BATCH);
        while out.len() < BATCH {
            let Rows::Blocks {
                input,
                carry,
                next_line,
                free,
            } = self
            else {
                break;
            };
            // `buf` is storage whose first `len` bytes are the block; recycled storage is
            // already initialised, so reading into it costs no clearing pass.
            let mut buf = free.pop().unwrap_or_default();
            let mut len = carry.len();
            if buf.len() < len {
                buf.resize(len, 0);
            }
            buf[..len].copy_from_slice(carry);
            carry.clear();
            let mut eof = false;
            while len < BLOCK && !eof {
                let want = BLOCK - len;
                eof = fill_at(input, &mut buf, &mut len, want, &header.file)?;
            }
            // Cut at the last line end; a line longer than a block makes the block longer.
            let end = loop {
                if eof {
                    break len;
                }
                match memchr::memrchr(b'\n', &buf[..len]) {
                    Some(nl) => break nl + 1,
                    None => eof = fill_at(input, &mut buf, &mut len, BLOCK, &header.file)?,
                }
            };
            carry.extend_from_slice(&buf[end..len]);
            len = end;
            if len == 0 {
                free.push(buf);
                break;
            }
            let bytes = &buf[..len];
            if !is_plain(bytes) {
                buf.truncate(len);
                buf.append(carry);
                let first_line = *next_line;
                if let Rows::Blocks { input, .. } = std::mem::replace(self, Rows::Taken) {
                    let rest = Cursor::new(buf).chain(input);
                    *self = Rows::Csv(Box::new(TableReader::resume(rest, header, first_line)));
                }
                break;
            }
            let lines = memchr::memchr_iter(b'\n', bytes).count() as u64
                + u64::from(bytes.last() != Some(&b'\n'));
            out.push(Block {
                bytes: buf,
                len,
                first_line: *next_line,
                rows: Vec::with_capacity(lines as usize),
            });
            *next_line += lines;
        }
        Ok(out)
    }
}

/// Parse the lines of a plain block; its buffer comes back for the next block.
fn parse_block<P: RowParser>(
    block: Block,
    header: &Header,
    parser: &P,
) -> (Batch<P::Key>, Vec<u8>) {
    let bytes = &block.bytes[..block.len];
    let mut batch = Batch {
        keys: LocalKeys::default(),
        rows: block.rows,
        error: None,
    };
    let mut cache = KeyCache::default();
    // Parse the line ending at `end` whose fields start at `bounds` plus the last one from
    // `last_start`; `None` when it parsed (or was blank).
    let mut finish = |end: usize, last_start: usize, bounds: &mut Vec<(usize, usize)>, line| {
        let line_start = bounds.first().map_or(last_start, |b| b.0);
        let stop = if end > line_start && bytes[end - 1] == b'\r' {
            end - 1
        } else {
            end
        };
        bounds.push((last_start, stop));
        // Blank lines are skipped, as the general CSV reader does.
        if stop == line_start {
            return None;
        }
        if bounds.len() != header.n_fields {
            return Some(header.width_error(line, bounds.len()));
        }
        let row = Row {
            header,
            bytes,
            bounds,
            line,
        };
        match parser.parse(&row, &mut cache, &mut batch.keys) {
            Ok(r) => {
                batch.rows.push(r);
                None
            }
            Err(e) => Some(e),
        }
    };
    // Field bounds (in the block) of the current line before its last field.
    let mut bounds = Vec::with_capacity(header.n_fields);
    let mut field_start = 0;
    let mut line = block.first_line;
    let mut error = None;
    for_each_delimiter(bytes, |i, newline| {
        if newline {
            error = finish(i, field_start, &mut bounds, line);
            bounds.clear();
            line += 1;
        } else {
            bounds.push((field_start, i));
        }
        field_start = i + 1;
        error.is_none()
    });
    if error.is_none() && !bytes.is_empty() && bytes.last() != Some(&b'\n') {
        error = finish(bytes.len(), field_start, &mut bounds, line);
    }
    batch.error = error;
    (batch, block.bytes)
}

/// Call `f(i, is_newline)` for every `,` and `\n` of `bytes` in order, eight bytes at a time
/// (a word compare that flags the matching bytes exactly); stops when `f` returns `false`.
fn for_each_delimiter(bytes: &[u8], mut f: impl FnMut(usize, bool) -> bool) {
    const LOW7: u64 = 0x7f7f_7f7f_7f7f_7f7f;
    const COMMAS: u64 = 0x2c2c_2c2c_2c2c_2c2c;
    const NEWLINES: u64 = 0x0a0a_0a0a_0a0a_0a0a;
    // High bit of each byte of `v` that is zero (exact: no borrow between bytes).
    let zeros = |v: u64| !(((v & LOW7).wrapping_add(LOW7)) | v | LOW7);
    let mut chunks = bytes.chunks_exact(8);
    let mut base = 0;
    for chunk in &mut chunks {
        let mut word = [0u8; 8];
        word.copy_from_slice(chunk);
        let v = u64::from_le_bytes(word);
        let (c, n) = (zeros(v ^ COMMAS), zeros(v ^ NEWLINES));
        let mut hits = c | n;
        while hits != 0 {
            let bit = hits.trailing_zeros();
            let i = base + (bit / 8) as usize;
            if !f(i, n & (1 << bit) != 0) {
                return;
            }
            hits &= hits - 1;
        }
        base += 8;
    }
    for (k, &b) in chunks.remainder().iter().enumerate() {
        if (b == b',' || b == b'\n') && !f(base + k, b == b'\n') {
            return;
        }
    }
}

/// Up to [`CSV_BATCH`] rows from the general reader.
fn csv_batch<R: Read, P: RowParser>(
    rd: &mut TableReader<R>,
    header: &Header,
    parser: &P,
) -> Batch<P::Key> {
    let mut batch = Batch {
        keys: LocalKeys::default(),
        rows: Vec::new(),
        error: None,
    };
    let mut cache = KeyCache::default();
    while batch.rows.len() < CSV_BATCH {
        match rd.next() {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => {
                batch.error = Some(e);
                break;
            }
        }
        match parser.parse(&rd.row(header), &mut cache, &mut batch.keys) {
            Ok(r) => batch.rows.push(r),
            Err(e) => {
                batch.error = Some(e);
                break;
            }
        }
    }
    batch
}

/// Read up to `max` more bytes onto `buf`; `true` at the end of the input.
fn fill<R: Read>(input: &mut R, buf: &mut Vec<u8>, max: usize, file: &Path) -> Result<bool> {
    let mut len = buf.len();
    let end = fill_at(input, buf, &mut len, max, file)?;
    buf.truncate(len);
    Ok(end)
}

/// Read up to `max` more bytes into `buf` after its first `len` (which grows by the bytes
/// read), growing the storage only when it is too short; `true` at the end of the input.
fn fill_at<R: Read>(
    input: &mut R,
    buf: &mut Vec<u8>,
    len: &mut usize,
    max: usize,
    file: &Path,
) -> Result<bool> {
    let want = *len + max;
    if buf.len() < want {
        buf.resize(want, 0);
    }
    while *len < want {
        match input.read(&mut buf[*len..want]) {
            Ok(0) => return Ok(true),
            Ok(n) => *len += n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(Error::io(file, e)),
        }
    }
    Ok(false)
}

/// A line without its `\r` before the line end.
fn strip_cr(line: &[u8]) -> &[u8] {
    line.strip_suffix(b"\r").unwrap_or(line)
}

/// Whether the block splitter reads `bytes` as the general reader would: no quote character,
/// and every `\r` directly before a `\n`.
fn is_plain(bytes: &[u8]) -> bool {
    memchr::memchr(b'"', bytes).is_none()
        && memchr::memchr_iter(b'\r', bytes).all(|i| bytes.get(i + 1) == Some(&b'\n'))
}

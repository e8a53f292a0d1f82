//! Shared machinery of the CSV readers: opening an input, the general CSV reader (quoted
//! fields, any line terminator) that takes over where the parallel block splitter of
//! `blocks.rs` does not apply, and the table-level errors. Rows and their field parsing are in
//! `row.rs`, numbers in `number.rs`, the key cache in `key_cache.rs`, the digest taken while
//! reading in `digest.rs`; the rows go into the accumulator of `accumulator.rs`.

pub(crate) use super::row::Column;
use super::row::{Header, Row};
use crate::error::{Error, Location, Result};
use std::io::Read;
use std::path::{Path, PathBuf};

/// The display name of an input: the path, or `<stdin>` for `-`.
pub(crate) fn display_name(path: &Path) -> PathBuf {
    if path == Path::new("-") {
        PathBuf::from("<stdin>")
    } else {
        path.to_path_buf()
    }
}

/// Open a path for reading, `-` meaning standard input.
pub(crate) fn open(path: &Path) -> Result<Box<dyn Read + Send>> {
    if path == Path::new("-") {
        Ok(Box::new(std::io::stdin()))
    } else {
        Ok(Box::new(super::open::open_table(path)?))
    }
}

/// The general CSV reader (quoted fields, any line terminator): the path for tables the
/// block splitter of `blocks.rs` does not take. It yields [`Row`]s over its current record.
pub(crate) struct TableReader<R: Read> {
    csv: csv::Reader<R>,
    file: PathBuf,
    n_fields: usize,
    record: csv::ByteRecord,
    bounds: Vec<(usize, usize)>,
    /// Line of the input's first line in the file (1 when the input starts at the header).
    first_line: u64,
    /// 1-based line of the current record.
    pub line: u64,
}

fn csv_reader<R: Read>(input: R) -> csv::Reader<R> {
    csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(true)
        .buffer_capacity(1 << 18)
        .from_reader(input)
}

impl<R: Read> TableReader<R> {
    /// Read the header and map it onto `schema`.
    pub fn new(input: R, file: PathBuf, schema: &[Column]) -> Result<(Self, Header)> {
        let mut csv = csv_reader(input);
        let mut header = csv::ByteRecord::new();
        let got = csv
            .read_byte_record(&mut header)
            .map_err(|e| csv_error(&file, 0, e))?;
        if !got {
            return Err(Error::Table {
                path: file,
                message: format!(
                    "the file is empty; expected a header line with the columns {}",
                    super::row::schema_list(schema)
                ),
            });
        }
        let header = Header::map(header.iter(), file.clone(), schema)?;
        let reader = TableReader {
            csv,
            file,
            n_fields: header.n_fields,
            record: csv::ByteRecord::new(),
            bounds: Vec::new(),
            first_line: 1,
            line: 1,
        };
        Ok((reader, header))
    }

    /// Go on reading data rows from `input`, whose first byte starts line `first_line` of the
    /// table `header` describes.
    pub fn resume(input: R, header: &Header, first_line: u64) -> Self {
        TableReader {
            csv: csv_reader(input),
            file: header.file.clone(),
            n_fields: header.n_fields,
            record: csv::ByteRecord::new(),
            bounds: Vec::new(),
            first_line,
            line: first_line.saturating_sub(1),
        }
    }

    /// Advance to the next record; `false` at the end of the input.
    pub fn next(&mut self) -> Result<bool> {
        let offset = self.first_line - 1;
        let got = self
            .csv
            .read_byte_record(&mut self.record)
            .map_err(|e| csv_error(&self.file, offset, e))?;
        if !got {
            return Ok(false);
        }
        self.line = self
            .record
            .position()
            .map_or(self.line + 1, |p| p.line() + offset);
        if self.record.len() != self.n_fields {
            return Err(Error::Data {
                location: Location {
                    file: self.file.clone(),
                    line: self.line,
                    column: None,
                    field: None,
                },
                message: format!(
                    "row has {} fields, the header has {}",
                    self.record.len(),
                    self.n_fields
                ),
            });
        }
        self.bounds.clear();
        let record = &self.record;
        self.bounds
            .extend((0..record.len()).filter_map(|i| record.range(i).map(|r| (r.start, r.end))));
        Ok(true)
    }

    /// The current record as a row of the table `header` describes.
    pub fn row<'a>(&'a self, header: &'a Header) -> Row<'a> {
        Row {
            header,
            bytes: self.record.as_slice(),
            bounds: &self.bounds,
            line: self.line,
        }
    }
}

fn csv_error(file: &Path, offset: u64, e: csv::Error) -> Error {
    let line = e.position().map_or(0, |p| p.line() + offset);
    match e.into_kind() {
        csv::ErrorKind::Io(io) => Error::io(file, io),
        other => Error::Data {
            location: Location {
                file: file.to_path_buf(),
                line,
                column: None,
                field: None,
            },
            message: format!("malformed CSV: {other:?}"),
        },
    }
}

/// The error for a table with a header and no data rows.
pub(crate) fn no_data_rows(path: PathBuf) -> Error {
    Error::Table {
        path,
        message: "the table has a header but no data rows".into(),
    }
}

//! One data row of a CSV table as the readers see it, whichever path split it (the parallel
//! block splitter of `blocks.rs` or the general CSV reader of `table.rs`): its fields as byte
//! ranges of one buffer, its line, and the accessors that parse a schema column with a precise
//! error location. Also the header: its mapping onto a table's schema.

use crate::error::{Error, Location, Result};
use std::path::PathBuf;

/// One column of a table schema.
pub(crate) struct Column {
    /// Header name.
    pub name: &'static str,
    /// Whether the table must have it.
    pub required: bool,
}

impl Column {
    /// A column every table must have.
    pub const fn required(name: &'static str) -> Column {
        Column {
            name,
            required: true,
        }
    }

    /// A column a table may leave out.
    pub const fn optional(name: &'static str) -> Column {
        Column {
            name,
            required: false,
        }
    }
}

/// The header of a table mapped onto its schema.
#[derive(Clone, Debug)]
pub(crate) struct Header {
    /// The file name used in messages.
    pub file: PathBuf,
    /// For each schema column, its 0-based index in the records, if present.
    pub index: Vec<Option<usize>>,
    /// Number of fields of the header (every row must have as many).
    pub n_fields: usize,
}

impl Header {
    /// Map the header fields `fields` (line 1 of `file`) onto `schema`.
    pub fn map<'a>(
        fields: impl Iterator<Item = &'a [u8]>,
        file: PathBuf,
        schema: &[Column],
    ) -> Result<Header> {
        let mut index = vec![None; schema.len()];
        let mut n_fields = 0;
        for (i, raw) in fields.enumerate() {
            n_fields += 1;
            let raw = if i == 0 {
                raw.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(raw)
            } else {
                raw
            };
            let name = String::from_utf8_lossy(raw);
            let loc = Location {
                file: file.clone(),
                line: 1,
                column: Some(i as u64 + 1),
                field: Some(crate::error::excerpt(raw)),
            };
            let Some(k) = schema.iter().position(|c| c.name == name) else {
                return Err(Error::Data {
                    location: loc,
                    message: format!(
                        "unknown column `{}`; allowed columns are {}",
                        crate::error::excerpt(raw),
                        schema_list(schema)
                    ),
                });
            };
            if index[k].is_some() {
                return Err(Error::Data {
                    location: loc,
                    message: format!("column `{name}` appears twice in the header"),
                });
            }
            index[k] = Some(i);
        }
        if let Some(k) = (0..schema.len()).find(|&k| schema[k].required && index[k].is_none()) {
            return Err(Error::Data {
                location: Location {
                    file,
                    line: 1,
                    column: None,
                    field: Some(schema[k].name.to_string()),
                },
                message: format!(
                    "required column `{}` is missing; the header must name {}",
                    schema[k].name,
                    required_list(schema)
                ),
            });
        }
        Ok(Header {
            file,
            index,
            n_fields,
        })
    }

    /// Refuse a header that names one of the optional columns `a` and `b` without the other
    /// (the operator columns come as a pair).
    pub fn check_paired(&self, a: usize, b: usize, schema: &[Column]) -> Result<()> {
        let (have, missing) = match (self.index[a], self.index[b]) {
            (Some(i), None) => (i, b),
            (None, Some(i)) => (i, a),
            _ => return Ok(()),
        };
        let other = if missing == a { b } else { a };
        Err(Error::Data {
            location: Location {
                file: self.file.clone(),
                line: 1,
                column: Some(have as u64 + 1),
                field: Some(schema[other].name.to_string()),
            },
            message: format!(
                "column `{}` needs the column `{}` as well (operator labels come in pairs)",
                schema[other].name, schema[missing].name
            ),
        })
    }

    /// The error for a row whose field count differs from the header's.
    pub fn width_error(&self, line: u64, got: usize) -> Error {
        Error::Data {
            location: Location {
                file: self.file.clone(),
                line,
                column: None,
                field: None,
            },
            message: format!("row has {got} fields, the header has {}", self.n_fields),
        }
    }
}

/// One data row: field `i` is `bytes[bounds[i].0..bounds[i].1]`.
pub(crate) struct Row<'a> {
    pub header: &'a Header,
    pub bytes: &'a [u8],
    pub bounds: &'a [(usize, usize)],
    /// 1-based line of the row.
    pub line: u64,
}

impl Row<'_> {
    /// Location of schema column `k` in the row.
    pub fn location(&self, k: usize, name: &str) -> Location {
        Location {
            file: self.header.file.clone(),
            line: self.line,
            column: self.header.index[k].map(|i| i as u64 + 1),
            field: Some(name.to_string()),
        }
    }

    /// The byte range of record field `i` (`None` beyond the row).
    pub fn range(&self, i: usize) -> Option<(usize, usize)> {
        self.bounds.get(i).copied()
    }

    /// Raw bytes of schema column `k` (empty when the column is absent).
    pub fn raw(&self, k: usize) -> &[u8] {
        match self.header.index[k].and_then(|i| self.range(i)) {
            Some((a, b)) => &self.bytes[a..b],
            None => b"",
        }
    }

    fn field_error(&self, k: usize, schema: &[Column], expected: &str) -> Error {
        let name = schema[k].name;
        Error::Data {
            location: self.location(k, name),
            message: format!(
                "cannot read `{}` as {expected}",
                crate::error::excerpt(self.raw(k))
            ),
        }
    }

    /// Schema column `k` as an integer.
    pub fn int(&self, k: usize, schema: &[Column]) -> Result<i64> {
        parse_int(self.raw(k)).ok_or_else(|| self.field_error(k, schema, "an integer"))
    }

    /// Schema column `k` as a time value in `0..=MAX_TIME`.
    pub fn time(&self, k: usize, schema: &[Column]) -> Result<u32> {
        let v = self.int(k, schema)?;
        if v < 0 || v > i64::from(super::MAX_TIME) {
            return Err(Error::Data {
                location: self.location(k, schema[k].name),
                message: format!(
                    "`{}` = {v} is out of range; expected 0 <= {} <= {}",
                    schema[k].name,
                    schema[k].name,
                    super::MAX_TIME
                ),
            });
        }
        Ok(v as u32)
    }

    /// Schema column `k` as a momentum component.
    pub fn mom(&self, k: usize, schema: &[Column]) -> Result<i32> {
        let v = self.int(k, schema)?;
        i32::try_from(v)
            .map_err(|_| self.field_error(k, schema, "a momentum component (32-bit integer)"))
    }

    /// Schema column `k` as a finite float.
    pub fn float(&self, k: usize, schema: &[Column]) -> Result<f64> {
        let raw = self.raw(k);
        let v: f64 = super::number::parse_float(raw)
            .ok_or_else(|| self.field_error(k, schema, "a number"))?;
        if !v.is_finite() {
            return Err(Error::Data {
                location: self.location(k, schema[k].name),
                message: format!(
                    "non-finite value `{}`; the format allows finite numbers only",
                    crate::error::excerpt(raw)
                ),
            });
        }
        Ok(v)
    }

    /// Schema column `k` as text (must be UTF-8).
    pub fn text(&self, k: usize, schema: &[Column]) -> Result<&str> {
        std::str::from_utf8(self.raw(k)).map_err(|_| self.field_error(k, schema, "UTF-8 text"))
    }

    /// The sink and source operator labels of the row from columns `sink` and `source`:
    /// `None` when both are empty (or absent), an error when only one is filled.
    pub fn operators(
        &self,
        sink: usize,
        source: usize,
        schema: &[Column],
    ) -> Result<Option<(&str, &str)>> {
        let (a, b) = (self.text(sink, schema)?, self.text(source, schema)?);
        match (a.is_empty(), b.is_empty()) {
            (true, true) => Ok(None),
            (false, false) => Ok(Some((a, b))),
            (true, false) | (false, true) => {
                let empty = if a.is_empty() { sink } else { source };
                Err(Error::Data {
                    location: self.location(empty, schema[empty].name),
                    message: format!(
                        "`{}` is empty while `{}` is `{}`: give both operator labels or neither",
                        schema[empty].name,
                        schema[if empty == sink { source } else { sink }].name,
                        crate::error::excerpt(if a.is_empty() { b } else { a }.as_bytes())
                    ),
                })
            }
        }
    }
}

/// Parse an optionally signed decimal integer without allocating; `None` on anything else.
fn parse_int(b: &[u8]) -> Option<i64> {
    let (neg, digits) = match b.first() {
        Some(b'-') => (true, &b[1..]),
        Some(b'+') => (false, &b[1..]),
        _ => (false, b),
    };
    if digits.is_empty() {
        return None;
    }
    let mut v: i64 = 0;
    for &c in digits {
        if !c.is_ascii_digit() {
            return None;
        }
        let d = i64::from(c - b'0');
        v = v.checked_mul(10)?;
        v = if neg {
            v.checked_sub(d)?
        } else {
            v.checked_add(d)?
        };
    }
    Some(v)
}

pub(crate) fn schema_list(schema: &[Column]) -> String {
    schema
        .iter()
        .map(|c| {
            if c.required {
                c.name.to_string()
            } else {
                format!("{} (optional)", c.name)
            }
        })
        .collect::<Vec<_>>()
        .join(", ")
}

fn required_list(schema: &[Column]) -> String {
    schema
        .iter()
        .filter(|c| c.required)
        .map(|c| c.name)
        .collect::<Vec<_>>()
        .join(", ")
}

/// One data row parsed on a worker thread: the channel as a batch-local key index, the time
/// (`t` or `tau`), configuration, source and value, and the row's line.
pub(crate) struct ParsedRow {
    pub key: u32,
    pub t: u32,
    pub config: i64,
    pub source: Option<i64>,
    pub re: f64,
    pub im: f64,
    pub line: u64,
}

/// Where a table keeps the value columns of a row (indices into its schema).
pub(crate) struct ValueColumns {
    pub re: usize,
    pub im: usize,
    /// The source-position column, when the header has it.
    pub source: Option<usize>,
}

impl ParsedRow {
    /// The row with its key, time and configuration already parsed: the real and imaginary
    /// parts and the source position are read here, in that order (the first bad field is
    /// the one reported).
    pub(crate) fn read(
        rd: &Row,
        (key, t, config): (u32, u32, i64),
        cols: &ValueColumns,
        schema: &[Column],
    ) -> Result<ParsedRow> {
        let re = rd.float(cols.re, schema)?;
        let im = rd.float(cols.im, schema)?;
        let source = match cols.source {
            Some(c) => Some(rd.int(c, schema)?),
            None => None,
        };
        Ok(ParsedRow {
            key,
            t,
            config,
            source,
            re,
            im,
            line: rd.line,
        })
    }
}

//! Result tables: one generic [`Table`] of text, integer and float cells, written as CSV and
//! JSON for further analysis elsewhere, and rendered as aligned text for the end-of-run summary.
//!
//! Floats are written with the shortest representation that parses back to the same `f64`
//! (Rust's `Debug` formatting of `f64`, the round-trip rule of Steele & White / Ryu), so
//! nothing is lost between the tool and a notebook. Per-resample values get their own long
//! table ([`samples_table`]) so errors can be recomputed or propagated further by the user.

use crate::error::{Error, Result};
use crate::resample::{Resampled, Scheme};
use serde::ser::{SerializeMap, SerializeSeq};
use serde::{Serialize, Serializer};
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::Path;

/// One table cell.
#[derive(Clone, Debug, PartialEq)]
pub enum Cell {
    /// Free text (labels, channel names, method names).
    Text(String),
    /// An exact integer (time slices, counts, momenta).
    Int(i64),
    /// A float; NaN marks "no value" (written `NaN` in CSV, `null` in JSON).
    Float(f64),
}

impl Cell {
    /// The CSV field: text as is, integers in decimal, floats shortest round-trip.
    pub fn to_field(&self) -> String {
        match self {
            Cell::Text(s) => s.clone(),
            Cell::Int(i) => i.to_string(),
            Cell::Float(x) => round_trip(*x),
        }
    }

    /// A short human-readable form for terminal and HTML tables: at most 6 significant
    /// digits, trailing zeros dropped.
    pub fn to_display(&self) -> String {
        match self {
            Cell::Text(s) => s.clone(),
            Cell::Int(i) => i.to_string(),
            Cell::Float(x) => trim_zeros(&significant(*x, 6)),
        }
    }

    /// True for numbers (right-aligned when rendered).
    pub fn is_numeric(&self) -> bool {
        !matches!(self, Cell::Text(_))
    }
}

impl From<&str> for Cell {
    fn from(s: &str) -> Self {
        Cell::Text(s.to_string())
    }
}
impl From<String> for Cell {
    fn from(s: String) -> Self {
        Cell::Text(s)
    }
}
impl From<i64> for Cell {
    fn from(i: i64) -> Self {
        Cell::Int(i)
    }
}
impl From<i32> for Cell {
    fn from(i: i32) -> Self {
        Cell::Int(i64::from(i))
    }
}
impl From<u32> for Cell {
    fn from(i: u32) -> Self {
        Cell::Int(i64::from(i))
    }
}
impl From<usize> for Cell {
    fn from(i: usize) -> Self {
        // usize beyond i64::MAX cannot occur for counts held in memory; saturate rather than wrap.
        Cell::Int(i64::try_from(i).unwrap_or(i64::MAX))
    }
}
impl From<f64> for Cell {
    fn from(x: f64) -> Self {
        Cell::Float(x)
    }
}

impl Serialize for Cell {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        match self {
            Cell::Text(t) => s.serialize_str(t),
            Cell::Int(i) => s.serialize_i64(*i),
            Cell::Float(x) if x.is_finite() => s.serialize_f64(*x),
            Cell::Float(_) => s.serialize_unit(),
        }
    }
}

/// A named table: column names and rows of cells, every row as long as `columns`.
#[derive(Clone, Debug, PartialEq)]
pub struct Table {
    /// File stem and caption (e.g. `form_factors`).
    pub name: String,
    /// Column names, in output order.
    pub columns: Vec<String>,
    /// Rows; each has one cell per column.
    pub rows: Vec<Vec<Cell>>,
}

impl Table {
    /// An empty table with these columns.
    pub fn new(name: impl Into<String>, columns: &[&str]) -> Self {
        Table {
            name: name.into(),
            columns: columns.iter().map(|c| c.to_string()).collect(),
            rows: Vec::new(),
        }
    }

    /// Append a row; it must have one cell per column.
    pub fn push_row(&mut self, row: Vec<Cell>) -> Result<()> {
        if row.len() != self.columns.len() {
            return Err(Error::analysis(
                "report",
                format!(
                    "table `{}`: a row has {} cells, expected {} (columns {})",
                    self.name,
                    row.len(),
                    self.columns.len(),
                    self.columns.join(", ")
                ),
            ));
        }
        self.rows.push(row);
        Ok(())
    }

    /// Check that every row has one cell per column.
    pub fn validate(&self) -> Result<()> {
        for (i, row) in self.rows.iter().enumerate() {
            if row.len() != self.columns.len() {
                return Err(Error::analysis(
                    "report",
                    format!(
                        "table `{}`: row {} has {} cells, expected {}",
                        self.name,
                        i + 1,
                        row.len(),
                        self.columns.len()
                    ),
                ));
            }
        }
        Ok(())
    }
}

/// Serializes a table as a JSON array of objects whose keys keep the column order.
struct JsonRows<'a>(&'a Table);
struct JsonRow<'a>(&'a [String], &'a [Cell]);

impl Serialize for JsonRows<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        let mut seq = s.serialize_seq(Some(self.0.rows.len()))?;
        for row in &self.0.rows {
            seq.serialize_element(&JsonRow(&self.0.columns, row))?;
        }
        seq.end()
    }
}

impl Serialize for JsonRow<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> std::result::Result<S::Ok, S::Error> {
        let mut map = s.serialize_map(Some(self.0.len()))?;
        for (k, v) in self.0.iter().zip(self.1) {
            map.serialize_entry(k, v)?;
        }
        map.end()
    }
}

/// Write `table` as CSV (header line, then one line per row) to `path`.
pub fn write_csv(table: &Table, path: &Path) -> Result<()> {
    table.validate()?;
    let file = File::create(path).map_err(|e| Error::io(path, e))?;
    let mut w = csv::Writer::from_writer(BufWriter::new(file));
    let io = |e: csv::Error| Error::io(path, e.into());
    w.write_record(&table.columns).map_err(io)?;
    for row in &table.rows {
        w.write_record(row.iter().map(Cell::to_field)).map_err(io)?;
    }
    w.flush().map_err(|e| Error::io(path, e))
}

/// Write `table` as a JSON array of objects (keys in column order; NaN and infinities as
/// `null`) to `path`.
pub fn write_json(table: &Table, path: &Path) -> Result<()> {
    table.validate()?;
    let file = File::create(path).map_err(|e| Error::io(path, e))?;
    let mut w = BufWriter::new(file);
    serde_json::to_writer_pretty(&mut w, &JsonRows(table))
        .map_err(|e| Error::io(path, e.into()))?;
    w.write_all(b"\n")
        .and_then(|()| w.flush())
        .map_err(|e| Error::io(path, e))
}

/// Write `table` as `<dir>/<name>.csv` and `<dir>/<name>.json`. The name must be a plain
/// file stem (no path separators, not empty, not starting with a dot).
pub fn write_table_files(table: &Table, dir: &Path) -> Result<()> {
    let stem = &table.name;
    if stem.is_empty() || stem.starts_with('.') || stem.contains(['/', '\\']) {
        return Err(Error::analysis(
            "report",
            format!("table name `{stem}` cannot be used as a file name"),
        ));
    }
    write_csv(table, &dir.join(format!("{stem}.csv")))?;
    write_json(table, &dir.join(format!("{stem}.json")))
}

/// Render `table` as aligned plain text for a terminal: a caption line, a header, a rule,
/// at most `max_rows` rows (then a line saying how many were left out). Numbers are
/// right-aligned with 6 significant digits, text left-aligned.
pub fn render_text(table: &Table, max_rows: usize) -> String {
    let shown = table.rows.len().min(max_rows);
    let cells: Vec<Vec<String>> = table.rows[..shown]
        .iter()
        .map(|r| r.iter().map(Cell::to_display).collect())
        .collect();
    let mut width: Vec<usize> = table.columns.iter().map(|c| c.chars().count()).collect();
    for row in &cells {
        for (w, c) in width.iter_mut().zip(row) {
            *w = (*w).max(c.chars().count());
        }
    }
    let numeric: Vec<bool> = (0..table.columns.len())
        .map(|j| {
            let mut col = table.rows[..shown].iter().filter_map(|r| r.get(j));
            col.clone().next().is_some() && col.all(Cell::is_numeric)
        })
        .collect();
    let line = |fields: &[String]| -> String {
        let parts: Vec<String> = fields
            .iter()
            .zip(&width)
            .zip(&numeric)
            .map(|((f, &w), &num)| {
                if num {
                    format!("{f:>w$}")
                } else {
                    format!("{f:<w$}")
                }
            })
            .collect();
        parts.join("  ").trim_end().to_string()
    };
    let mut out = format!("{}\n", table.name);
    out.push_str(&line(&table.columns));
    out.push('\n');
    let total: usize = width.iter().sum::<usize>() + 2 * width.len().saturating_sub(1);
    out.push_str(&"-".repeat(total));
    out.push('\n');
    for row in &cells {
        out.push_str(&line(row));
        out.push('\n');
    }
    if table.rows.len() > shown {
        out.push_str(&format!(
            "... {} more rows (see {}.csv)\n",
            table.rows.len() - shown,
            table.name
        ));
    }
    out
}

/// The per-resample values of several quantities as one long table with columns
/// `quantity, scheme, central, sample, value` (one row per quantity and sample, samples
/// numbered from 0), so the analysis can be continued elsewhere with the error formula of
/// the scheme (`jackknife` or `bootstrap`).
pub fn samples_table(name: &str, items: &[(&str, &Resampled)]) -> Table {
    let mut t = Table::new(name, &["quantity", "scheme", "central", "sample", "value"]);
    for (quantity, r) in items {
        let scheme = match r.scheme {
            Scheme::Jackknife => "jackknife",
            Scheme::Bootstrap => "bootstrap",
        };
        for (i, &v) in r.samples.iter().enumerate() {
            t.rows.push(vec![
                Cell::from(*quantity),
                Cell::from(scheme),
                Cell::Float(r.central),
                Cell::from(i),
                Cell::Float(v),
            ]);
        }
    }
    t
}

/// Shortest decimal form that parses back to exactly `x`; `NaN`, `inf`, `-inf` otherwise.
pub fn round_trip(x: f64) -> String {
    format!("{x:?}")
}

/// `x` with `digits` significant digits; scientific notation outside `1e-4 <= |x| < 1e6`.
pub fn significant(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return round_trip(x);
    }
    if x == 0.0 {
        return "0".to_string();
    }
    let digits = digits.max(1);
    let exp = x.abs().log10().floor() as i32;
    if !(-4..6).contains(&exp) {
        return format!("{:.*e}", digits - 1, x);
    }
    let decimals = (digits as i32 - 1 - exp).max(0) as usize;
    format!("{x:.decimals$}")
}

/// Drop trailing zeros of the fraction (and a bare point), also before an exponent:
/// `0.100000` -> `0.1`, `1.50e-7` -> `1.5e-7`.
pub(crate) fn trim_zeros(s: &str) -> String {
    let (mant, exp) = match s.find('e') {
        Some(i) => s.split_at(i),
        None => (s, ""),
    };
    if !mant.contains('.') {
        return s.to_string();
    }
    format!("{}{exp}", mant.trim_end_matches('0').trim_end_matches('.'))
}

/// The physicist's `value(error)` notation with two significant digits of the error, e.g.
/// `1.2345(67)` for 1.2345 ± 0.0067 and `12.3(1.5)` style written as `12.3(15)`
/// (common practice). Falls back to the value alone when the error is not a positive number.
pub fn value_error(value: f64, error: f64) -> String {
    if !value.is_finite() {
        return round_trip(value);
    }
    if !(error.is_finite() && error > 0.0) {
        return significant(value, 6);
    }
    let mut decimals = 1 - error.log10().floor() as i32;
    let mut digits = (error * 10f64.powi(decimals)).round();
    if digits >= 100.0 {
        decimals -= 1;
        digits = (error * 10f64.powi(decimals)).round();
    }
    if decimals > 0 {
        let d = decimals as usize;
        format!("{value:.d$}({digits:.0})")
    } else {
        let scale = 10f64.powi(-decimals);
        let v = (value / scale).round() * scale;
        format!("{v:.0}({:.0})", digits * scale)
    }
}

/// `value(e1)(e2)...`, e.g. `0.968(18)(8)` for a statistical and a systematic error: the
/// largest error sets the last digit of the value with two significant digits (the Particle
/// Data Group's rounding of a value to its error), and every error is written in units of
/// that digit, so a much smaller error shows as `(1)` or `(0)` rather than giving the largest
/// one three or more digits (`1(12)(1)`, not `1.1(122)(5)`).
pub fn value_errors(value: f64, errors: &[f64]) -> String {
    let largest = errors
        .iter()
        .copied()
        .filter(|e| e.is_finite() && *e > 0.0)
        .fold(0.0, f64::max);
    if !value.is_finite() || largest <= 0.0 {
        return value_error(value, largest);
    }
    // two significant digits of the largest error; rounding may add a digit (0.0996 → 0.10)
    let mut decimals = 1 - largest.log10().floor() as i32;
    if (largest * 10f64.powi(decimals)).round() >= 100.0 {
        decimals -= 1;
    }
    let unit = 10f64.powi(-decimals);
    let digits = |e: f64| {
        if e.is_finite() {
            // in units of the last digit of the value, or in full when that digit is 10 or more
            format!("({:.0})", (e / unit).round() * unit.max(1.0))
        } else {
            "(?)".to_string()
        }
    };
    let v = if decimals > 0 {
        format!("{value:.*}", decimals as usize)
    } else {
        format!("{:.0}", (value / unit).round() * unit)
    };
    let errs: String = errors.iter().map(|&e| digits(e)).collect();
    format!("{v}{errs}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn value_errors_notation() {
        // decimals from the smaller error, two significant digits (common practice)
        assert_eq!(value_errors(0.94123, &[0.0085, 0.0031]), "0.9412(85)(31)");
        assert_eq!(value_errors(0.96761, &[0.018, 0.008]), "0.968(18)(8)");
        assert_eq!(value_errors(0.94123, &[0.0085, 0.0]), "0.9412(85)(0)");
        assert_eq!(value_errors(12.34, &[1.5, 0.27]), "12.3(15)(3)");
        assert_eq!(value_errors(3.571, &[0.24, 0.33]), "3.57(24)(33)");
        assert_eq!(value_errors(1.0, &[]), "1.00000");
        // an error larger than the value: the largest error keeps two digits, the smaller
        // one is rounded to the same last digit (was `1.1(122)(5)`)
        assert_eq!(value_errors(1.1, &[12.2, 0.5]), "1(12)(1)");
        assert_eq!(value_errors(1.234, &[0.5, 0.0012]), "1.23(50)(0)");
        // errors of 100 and more are written in full, as by value_error
        assert_eq!(value_errors(1.3, &[9723.12, 0.03]), "0(9700)(0)");
        assert_eq!(value_errors(0.5, &[0.0996, 0.02]), "0.50(10)(2)");
    }

    #[test]
    fn value_error_notation() {
        // Two significant digits of the error (common practice).
        assert_eq!(value_error(1.2345, 0.0067), "1.2345(67)");
        assert_eq!(value_error(0.5, 0.0123), "0.500(12)");
        assert_eq!(value_error(-0.5, 0.0123), "-0.500(12)");
        assert_eq!(value_error(12.34, 1.5), "12.3(15)");
        assert_eq!(value_error(1234.0, 25.0), "1234(25)");
        assert_eq!(value_error(12345.0, 250.0), "12350(250)");
        // 0.0995 rounds to 100 in units of the last digit: one digit fewer.
        assert_eq!(value_error(1.0, 0.0995), "1.00(10)");
        assert_eq!(value_error(1.0, 0.0), "1.00000");
        assert_eq!(value_error(1.0, f64::NAN), "1.00000");
        assert_eq!(value_error(f64::NAN, 0.1), "NaN");
    }

    #[test]
    fn significant_digits() {
        assert_eq!(significant(0.123456789, 6), "0.123457");
        assert_eq!(significant(123.456789, 6), "123.457");
        assert_eq!(significant(1.5e-7, 3), "1.50e-7");
        assert_eq!(significant(0.0, 6), "0");
        assert_eq!(significant(f64::NEG_INFINITY, 6), "-inf");
    }

    #[test]
    fn display_drops_trailing_zeros() {
        assert_eq!(Cell::Float(0.1).to_display(), "0.1");
        assert_eq!(Cell::Float(1e-300).to_display(), "1e-300");
        assert_eq!(Cell::Float(6.02214076e23).to_display(), "6.02214e23");
        assert_eq!(Cell::Float(100.0).to_display(), "100");
        assert_eq!(Cell::Float(-0.5123456).to_display(), "-0.512346");
        assert_eq!(Cell::Float(f64::NAN).to_display(), "NaN");
    }

    #[test]
    fn round_trip_is_exact() {
        for &x in &[
            0.1,
            1.0 / 3.0,
            1e-300,
            -2.5e17,
            6.02214076e23,
            f64::MIN_POSITIVE,
        ] {
            let s = round_trip(x);
            let back: f64 = s.parse().unwrap();
            assert_eq!(back.to_bits(), x.to_bits(), "{s}");
        }
    }

    #[test]
    fn render_aligns_and_truncates() {
        let mut t = Table::new("masses", &["channel", "t", "E"]);
        t.push_row(vec!["p=000".into(), 3.into(), 0.51234567.into()])
            .unwrap();
        t.push_row(vec!["p=001".into(), 12.into(), f64::NAN.into()])
            .unwrap();
        t.push_row(vec!["p=011".into(), 4.into(), 0.6.into()])
            .unwrap();
        let s = render_text(&t, 2);
        let lines: Vec<&str> = s.lines().collect();
        assert_eq!(lines[0], "masses");
        assert_eq!(lines[1], "channel   t         E");
        assert_eq!(lines[3], "p=000     3  0.512346");
        assert_eq!(lines[4], "p=001    12       NaN");
        assert_eq!(lines[5], "... 1 more rows (see masses.csv)");
        assert_eq!(lines.len(), 6);
    }

    #[test]
    fn table_files_need_a_plain_name() {
        let dir = tempfile::tempdir().unwrap();
        let mut t = Table::new("../escape", &["a"]);
        assert!(write_table_files(&t, dir.path()).is_err());
        t.name = "fits".into();
        t.push_row(vec![1.5.into()]).unwrap();
        write_table_files(&t, dir.path()).unwrap();
        assert_eq!(
            std::fs::read_to_string(dir.path().join("fits.csv")).unwrap(),
            "a\n1.5\n"
        );
        assert!(dir.path().join("fits.json").exists());
    }

    #[test]
    fn push_row_rejects_wrong_length() {
        let mut t = Table::new("x", &["a", "b"]);
        let err = t.push_row(vec![1.into()]).unwrap_err().to_string();
        assert!(err.contains("1 cells, expected 2"), "{err}");
    }
}

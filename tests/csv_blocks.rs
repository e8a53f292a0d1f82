//! The parallel block reader of the CSV tables against the general CSV reader: the same table
//! read through both must give the same data and, when it is broken, the same first error
//! (message, line, column). A header with a quoted column name sends the whole table through
//! the general reader (quotes are CSV syntax, so the header means the same), which is how
//! these tests reach it. The tables are several blocks long (a block is 1 MiB), so rows,
//! duplicates and errors sit on both sides of block boundaries.

use formfactory::io::{read_threept_from, read_twopt_from};
use std::io::Cursor;
use std::path::Path;

const HEADER: &str = "config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im";
const QUOTED_HEADER: &str = "\"config\",tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im";

/// Data rows of a three-point table: `n_cfg` configurations of channels tsep 8, tau 0..=8,
/// q = (k, 0, 0) for k in `0..n_q`, values that vary with every field.
fn rows(n_cfg: usize, n_q: i32) -> Vec<String> {
    let mut out = Vec::new();
    for k in 0..n_q {
        for tau in 0..=8 {
            for c in 0..n_cfg {
                let x = 1e-3 * (1.0 + f64::from(k) + 0.1 * f64::from(tau)) + 1e-7 * c as f64;
                out.push(format!(
                    "{},8,{tau},0,0,0,{k},0,0,V4,unpol,{x:.9},{:.6e}",
                    1000 + 4 * c,
                    -x / 3.0
                ));
            }
        }
    }
    out
}

fn table(header: &str, rows: &[String], eol: &str) -> Vec<u8> {
    let mut s = String::from(header);
    s.push_str(eol);
    for r in rows {
        s.push_str(r);
        s.push_str(eol);
    }
    s.into_bytes()
}

fn read(bytes: Vec<u8>) -> Result<formfactory::data::ThreePointData, String> {
    read_threept_from(Cursor::new(bytes), Path::new("t.csv")).map_err(|e| e.to_string())
}

/// Both readers on the same rows (the second with the quoted header).
fn both(rows: &[String], eol: &str) -> (Result<String, String>, Result<String, String>) {
    let fast = read(table(HEADER, rows, eol)).map(|d| format!("{d:?}"));
    let general = read(table(QUOTED_HEADER, rows, eol)).map(|d| format!("{d:?}"));
    (fast, general)
}

// About 2.9 MB of rows (three blocks); blank lines and CRLF line ends read as the general
// reader reads them.
#[test]
fn block_reader_reads_what_the_general_reader_reads() {
    let mut r = rows(400, 20);
    assert!(r.len() * 40 > 2 << 20, "the table must span several blocks");
    let (fast, general) = both(&r, "\n");
    let fast = fast.expect("plain table reads");
    assert_eq!(Ok(fast.clone()), general);
    let (crlf, general_crlf) = both(&r, "\r\n");
    assert_eq!(crlf.as_ref(), Ok(&fast), "CRLF line ends change nothing");
    assert_eq!(crlf, general_crlf);
    r.insert(20_000, String::new());
    r.insert(5, String::new());
    let (blank, general_blank) = both(&r, "\n");
    assert_eq!(blank.as_ref(), Ok(&fast), "blank lines are skipped");
    assert_eq!(blank, general_blank);
    // No line end after the last row (standard input may end so).
    let mut cut = table(HEADER, &r, "\n");
    cut.pop();
    assert_eq!(read(cut).map(|d| format!("{d:?}")), Ok(fast));
}

/// A change to the rows that breaks the table.
type Edit<'a> = Box<dyn Fn(&mut Vec<String>) + 'a>;

// Errors far into the table (past the first blocks) name the same line, column and text.
#[test]
fn errors_in_later_blocks_are_the_general_readers_errors() {
    let base = rows(400, 20);
    let n = base.len();
    let cases: Vec<(&str, Edit)> = vec![
        (
            "bad number",
            Box::new(|r: &mut Vec<String>| {
                r[n - 7] = r[n - 7].replace(",V4,unpol,", ",V4,unpol,x")
            }),
        ),
        (
            "too few fields",
            Box::new(|r: &mut Vec<String>| r[n / 2] = "1000,8,0,0,0,0".into()),
        ),
        (
            "duplicate across blocks",
            Box::new(|r: &mut Vec<String>| r[n - 3] = r[2].clone()),
        ),
        (
            "tau beyond tsep",
            Box::new(|r: &mut Vec<String>| r[40_000] = r[40_000].replacen(",8,", ",8,9", 1)),
        ),
    ];
    for (what, edit) in cases {
        let mut r = base.clone();
        edit(&mut r);
        let (fast, general) = both(&r, "\n");
        let fast = fast.expect_err(what);
        assert_eq!(Err(fast.clone()), general, "{what}");
        eprintln!("{what}: {fast}");
        assert!(fast.contains("t.csv:"), "{what}: {fast}");
    }
    // The line of the bad number: header + index + 1.
    let mut r = base.clone();
    r[n - 7] = r[n - 7].replace(",V4,unpol,", ",V4,unpol,x");
    let msg = read(table(HEADER, &r, "\n")).expect_err("bad number");
    assert!(msg.contains(&format!("t.csv:{}:12", n - 7 + 2)), "{msg}");
}

// A quoted field after the first blocks hands the rest of the table to the general reader:
// the result is the same as reading the whole table with it.
#[test]
fn a_quote_mid_table_switches_to_the_general_reader() {
    let mut r = rows(400, 20);
    let k = r.len() - 1000;
    r[k] = r[k].replace(",V4,", ",\"V4\",");
    let (fast, general) = both(&r, "\n");
    assert_eq!(fast, general);
    let plain = both(&rows(400, 20), "\n").0;
    assert_eq!(fast, plain, "a quoted V4 is V4");
    // A lone carriage return ends a line for the general reader, so it switches too.
    let mut r = rows(400, 20);
    let k = r.len() - 10;
    let next = r.remove(k + 1);
    r[k].push('\r');
    r[k].push_str(&next);
    let (fast, general) = both(&r, "\n");
    assert_eq!(fast, general);
}

// The two-point reader takes the same path.
#[test]
fn two_point_block_reader_matches_the_general_reader() {
    let mut s = String::from("config,px,py,pz,t,re,im\n");
    let mut q = String::from("\"config\",px,py,pz,t,re,im\n");
    for p in 0..6 {
        for t in 0..48 {
            for c in 0..400 {
                let line = format!(
                    "{},{p},0,0,{t},{:.8e},0\n",
                    10 + c,
                    (-0.5 * f64::from(t)).exp() * (1.0 + 1e-4 * c as f64)
                );
                s.push_str(&line);
                q.push_str(&line);
            }
        }
    }
    assert!(s.len() > 3 << 20);
    let a = read_twopt_from(Cursor::new(s.into_bytes()), Path::new("c.csv")).expect("reads");
    let b = read_twopt_from(Cursor::new(q.into_bytes()), Path::new("c.csv")).expect("reads");
    assert_eq!(a, b);
    assert_eq!(a.configs.len(), 400);
}

//! Tables as a reader sees them on the report page: every value with its error(s) in one
//! `value(error)` column (the physicist's notation, two significant digits of the largest
//! error), other numbers with four significant digits, and no value shown as `–`. The CSV
//! and JSON files keep every digit; this is for reading only.
//!
//! An error column is one named `error`, `error_<part>` or `<value>_error`; it belongs to
//! the nearest value column before it. When a value has parts and their sum (`error_total`
//! or `error_sys` next to parts), the sum is left out of the notation, and so is a part that
//! is zero in every row.

use super::table::{significant, trim_zeros, value_errors, Cell, Table};

fn is_error(name: &str) -> bool {
    name == "error" || name.starts_with("error_") || name.ends_with("_error")
}

/// A number for reading: four significant digits, `–` for no value.
fn short(x: f64) -> String {
    if x.is_nan() {
        "–".to_string()
    } else {
        let s = trim_zeros(&significant(x, 4));
        match s.strip_prefix('-') {
            Some(rest) => format!("−{rest}"),
            None => s,
        }
    }
}

/// `t` for the page: value and error columns merged, numbers shortened.
pub fn readable(t: &Table) -> Table {
    let n = t.columns.len();
    // for each kept column: its index and the error columns merged into it
    let mut plan: Vec<(usize, Vec<usize>)> = Vec::new();
    let mut i = 0;
    while i < n {
        let mut j = i + 1;
        while j < n && is_error(&t.columns[j]) && !is_error(&t.columns[i]) {
            j += 1;
        }
        let mut errs: Vec<usize> = (i + 1..j).collect();
        if errs.len() > 1 {
            // an error part that is zero in every row says nothing
            let zero = |k: usize| {
                t.rows
                    .iter()
                    .all(|r| matches!(r[k], Cell::Float(e) if e == 0.0 || e.is_nan()))
            };
            let informative: Vec<usize> = errs.iter().copied().filter(|&k| !zero(k)).collect();
            if !informative.is_empty() {
                errs = informative;
            }
        }
        if errs.len() > 1 {
            // keep the parts, leave out their sums
            let parts: Vec<usize> = errs
                .iter()
                .copied()
                .filter(|&k| !matches!(t.columns[k].as_str(), "error_total" | "error_sys"))
                .collect();
            if !parts.is_empty() {
                errs = parts;
            }
        }
        plan.push((i, errs));
        i = j;
    }
    let header = |(i, errs): &(usize, Vec<usize>)| {
        let name = &t.columns[*i];
        if errs.len() < 2 {
            return name.clone();
        }
        let parts: String = errs
            .iter()
            .map(|&k| {
                let c = &t.columns[k];
                let part = c.strip_prefix("error_").unwrap_or(c);
                format!("({part})")
            })
            .collect();
        format!("{name} {parts}")
    };
    let mut out = Table {
        name: t.name.clone(),
        columns: plan.iter().map(header).collect(),
        rows: Vec::with_capacity(t.rows.len()),
    };
    for row in &t.rows {
        let cells = plan
            .iter()
            .map(|(i, errs)| match (&row[*i], errs.is_empty()) {
                (Cell::Float(v), false) => {
                    let e: Vec<f64> = errs
                        .iter()
                        .map(|&k| match row[k] {
                            Cell::Float(e) => e,
                            Cell::Int(e) => e as f64,
                            Cell::Text(_) => f64::NAN,
                        })
                        .collect();
                    Cell::Text(if v.is_nan() {
                        "–".to_string()
                    } else {
                        value_errors(*v, &e).replacen('-', "−", 1)
                    })
                }
                (Cell::Float(v), true) => Cell::Text(short(*v)),
                (other, _) => other.clone(),
            })
            .collect();
        out.rows.push(cells);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn values_and_errors_are_merged() {
        let mut t = Table::new(
            "ff",
            &[
                "method",
                "value",
                "error_stat",
                "error_z",
                "error_total",
                "chi2_dof",
                "n",
            ],
        );
        t.push_row(vec![
            Cell::from("two_state"),
            Cell::Float(0.9675949668922991),
            Cell::Float(0.017998583665198697),
            Cell::Float(0.0079),
            Cell::Float(0.0197),
            Cell::Float(1.234567),
            Cell::Int(4),
        ])
        .unwrap();
        t.push_row(vec![
            Cell::from("x"),
            Cell::Float(-0.5),
            Cell::Float(0.25),
            Cell::Float(0.0),
            Cell::Float(0.25),
            Cell::Float(f64::NAN),
            Cell::Int(1),
        ])
        .unwrap();
        let r = readable(&t);
        assert_eq!(r.columns, ["method", "value (stat)(z)", "chi2_dof", "n"]);
        assert_eq!(r.rows[0][1], Cell::Text("0.968(18)(8)".into()));
        assert_eq!(r.rows[0][2], Cell::Text("1.235".into()));
        assert_eq!(r.rows[1][2], Cell::Text("–".into()));
        assert!(matches!(&r.rows[1][1], Cell::Text(s) if s.starts_with("−0.50(25)")));

        let mut t = Table::new("m", &["re", "re_error", "im", "im_error"]);
        t.push_row(vec![
            Cell::Float(0.8596),
            Cell::Float(0.0049),
            Cell::Float(-0.0074),
            Cell::Float(0.0037),
        ])
        .unwrap();
        let r = readable(&t);
        assert_eq!(r.columns, ["re", "im"]);
        assert_eq!(
            r.rows[0],
            [
                Cell::Text("0.8596(49)".into()),
                Cell::Text("−0.0074(37)".into())
            ]
        );
    }
}

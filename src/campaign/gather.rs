//! Reading one run's results for the combination: a derived quantity (`derived.csv` for the
//! unit, `derived_samples.csv` for the resamples), or a form factor at a chosen Q²
//! interpolated linearly in Q² between the two nearest shells of `formfactors.csv`
//! (resamples from `formfactor_samples.csv`; the shells' Q² taken at their central values).
//! Only the written tables are read, never the pipeline's internals.

use super::spec::QuantitySpec;
use crate::resample::{Resampled, Scheme};
use crate::{Error, Result};
use std::collections::BTreeMap;
use std::path::Path;

/// Method labels compare with `-` and `_` taken as the same (`two-state` = `two_state`).
fn same_label(a: Option<&String>, b: &str) -> bool {
    a.is_some_and(|a| a.replace('-', "_") == b.replace('-', "_"))
}

/// Rows of a CSV table as maps from column name to field.
fn read_rows(path: &Path) -> Result<Vec<BTreeMap<String, String>>> {
    let mut reader = csv::Reader::from_path(path).map_err(|e| csv_error(path, e))?;
    let headers = reader.headers().map_err(|e| csv_error(path, e))?.clone();
    let mut rows = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| csv_error(path, e))?;
        rows.push(
            headers
                .iter()
                .zip(record.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect(),
        );
    }
    Ok(rows)
}

fn csv_error(path: &Path, e: csv::Error) -> Error {
    Error::config(format!("{}: {e}", path.display()))
}

fn field<'a>(row: &'a BTreeMap<String, String>, name: &str, path: &Path) -> Result<&'a str> {
    row.get(name)
        .map(String::as_str)
        .ok_or_else(|| Error::config(format!("{}: no column `{name}`", path.display())))
}

fn number(row: &BTreeMap<String, String>, name: &str, path: &Path) -> Result<f64> {
    let text = field(row, name, path)?;
    text.parse().map_err(|_| {
        Error::config(format!(
            "{}: `{text}` in `{name}` is not a number",
            path.display()
        ))
    })
}

/// The resampled values of every label in a samples table.
fn read_samples(path: &Path) -> Result<BTreeMap<String, Resampled>> {
    let mut out: BTreeMap<String, (f64, Vec<f64>, Scheme)> = BTreeMap::new();
    for row in read_rows(path)? {
        let label = field(&row, "quantity", path)?.to_string();
        let scheme = match field(&row, "scheme", path)? {
            "bootstrap" => Scheme::Bootstrap,
            _ => Scheme::Jackknife,
        };
        let central = number(&row, "central", path)?;
        let value = number(&row, "value", path)?;
        out.entry(label)
            .or_insert_with(|| (central, Vec::new(), scheme))
            .1
            .push(value);
    }
    Ok(out
        .into_iter()
        .map(|(k, (c, s, scheme))| (k, Resampled::new(c, s, scheme)))
        .collect())
}

/// The quantity of `q` from the run in `run_dir`, with the power of fm in its unit.
pub fn read_quantity(run_dir: &Path, q: &QuantitySpec) -> Result<(Resampled, i32)> {
    match q.q2_gev2 {
        Some(q2) => form_factor_at(run_dir, q, q2).map(|v| (v, 0)),
        None => derived(run_dir, q),
    }
}

fn fm_power(unit: &str) -> i32 {
    match unit.trim() {
        "fm" => 1,
        "fm^2" | "fm2" | "fm²" => 2,
        "fm^3" => 3,
        _ => 0,
    }
}

fn derived(run_dir: &Path, q: &QuantitySpec) -> Result<(Resampled, i32)> {
    let table = run_dir.join("derived.csv");
    let rows = read_rows(&table)?;
    let row = rows
        .iter()
        .find(|r| {
            same_label(r.get("method"), &q.method)
                && r.get("model") == Some(&q.model)
                && r.get("quantity") == Some(&q.quantity)
        })
        .ok_or_else(|| {
            Error::config(format!(
                "{}: no row with method `{}`, model `{}`, quantity `{}`",
                table.display(),
                q.method,
                q.model,
                q.quantity
            ))
        })?;
    let unit = row.get("unit").map(String::as_str).unwrap_or("");
    let method = row.get("method").map_or(q.method.as_str(), String::as_str);
    let label = format!("{method}|{}|{}", q.model, q.quantity);
    let samples_path = run_dir.join("derived_samples.csv");
    let value = read_samples(&samples_path)?.remove(&label).ok_or_else(|| {
        Error::config(format!(
            "{}: no samples of `{label}`",
            samples_path.display()
        ))
    })?;
    Ok((value, fm_power(unit)))
}

fn form_factor_at(run_dir: &Path, q: &QuantitySpec, q2: f64) -> Result<Resampled> {
    let table = run_dir.join("formfactors.csv");
    let mut shells: Vec<(f64, String)> = Vec::new();
    let mut method = q.method.clone();
    for r in read_rows(&table)? {
        if same_label(r.get("method"), &q.method) && r.get("form_factor") == Some(&q.quantity) {
            method = field(&r, "method", &table)?.to_string();
            let x = number(&r, "q2_gev2", &table)?;
            shells.push((x, field(&r, "shell", &table)?.to_string()));
        }
    }
    shells.sort_by(|a, b| a.0.total_cmp(&b.0));
    let outside = || {
        Error::config(format!(
            "{}: Q² = {q2} GeV² is outside the shells of {} ({}): no interpolation",
            table.display(),
            q.quantity,
            shells
                .iter()
                .map(|s| format!("{:.4}", s.0))
                .collect::<Vec<_>>()
                .join(", ")
        ))
    };
    let i = shells
        .windows(2)
        .position(|w| w[0].0 <= q2 && q2 <= w[1].0)
        .ok_or_else(outside)?;
    let samples_path = run_dir.join("formfactor_samples.csv");
    let samples = read_samples(&samples_path)?;
    let get = |shell: &str| {
        let label = format!("{method}|{}|{shell}", q.quantity);
        samples.get(&label).cloned().ok_or_else(|| {
            Error::config(format!(
                "{}: no samples of `{label}`",
                samples_path.display()
            ))
        })
    };
    let (lo, hi) = (&shells[i], &shells[i + 1]);
    let (vlo, vhi) = (get(&lo.1)?, get(&hi.1)?);
    let t = if hi.0 > lo.0 {
        (q2 - lo.0) / (hi.0 - lo.0)
    } else {
        0.0
    };
    vlo.try_zip_map(&vhi, "interpolation in Q²", |a, b| a + t * (b - a))
}

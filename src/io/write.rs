//! Writers for the CSV exchange format (docs/data-format.md), used by the mock generator, the
//! tests and anyone who wants to hand a cleaned data set to another tool.
//!
//! Output is deterministic: the same data gives a byte-identical file. Rows are ordered by
//! channel (the `BTreeMap` key order of the data model), then time (`t` or `tau`), then
//! configuration (ascending). Floats are written with Rust's shortest round-trip formatting:
//! plain decimal (`{}`) for magnitudes in `[1e-4, 1e15)` and zero, scientific (`{:e}`)
//! otherwise, so reading the file back gives bit-identical values.
//!
//! Optional label columns (`smear`, `flavor`, `diagram`) are written only when at least one
//! channel carries that label; a channel without it gets an empty field there, which the
//! reader maps back to "no label". No `source` column is written: the data model holds
//! source-averaged values.

use crate::data::{Diagram, Series, ThreePointData, TwoPointData};
use crate::error::{Error, Result};
use std::io::Write;
use std::path::PathBuf;

/// The name used in errors of a writer, which has no path of its own.
const OUTPUT: &str = "<output>";

/// Format a float so that parsing the text gives back the same bits.
pub(crate) fn format_float(x: f64, out: &mut String) {
    use std::fmt::Write as _;
    let a = x.abs();
    // Writing to a String cannot fail.
    let _ = if a == 0.0 || (1e-4..1e15).contains(&a) {
        write!(out, "{x}")
    } else {
        write!(out, "{x:e}")
    };
}

fn table_error(message: String) -> Error {
    Error::Table {
        path: PathBuf::from(OUTPUT),
        message,
    }
}

fn csv_error(e: csv::Error) -> Error {
    match e.into_kind() {
        csv::ErrorKind::Io(io) => Error::io(OUTPUT, io),
        other => table_error(format!("CSV writer failed: {other:?}")),
    }
}

fn check_shape(series: &Series, n_cfg: usize, n_t: usize, channel: &str) -> Result<()> {
    if series.n_cfg != n_cfg
        || series.n_t != n_t
        || series.re.len() != n_t * n_cfg
        || series.im.len() != n_t * n_cfg
    {
        return Err(table_error(format!(
            "channel {channel}: series is {} x {} (re {}, im {} values), expected {n_t} time \
             slices x {n_cfg} configurations",
            series.n_t,
            series.n_cfg,
            series.re.len(),
            series.im.len()
        )));
    }
    if let Some(i) =
        (0..series.re.len()).find(|&i| !series.re[i].is_finite() || !series.im[i].is_finite())
    {
        return Err(table_error(format!(
            "channel {channel}: non-finite value at time {} configuration index {}; the \
             exchange format allows finite numbers only",
            i / n_cfg.max(1),
            i % n_cfg.max(1)
        )));
    }
    Ok(())
}

fn check_configs(configs: &[i64]) -> Result<()> {
    if let Some(w) = configs.windows(2).find(|w| w[0] >= w[1]) {
        return Err(table_error(format!(
            "configurations must be strictly ascending, found {} before {}",
            w[0], w[1]
        )));
    }
    Ok(())
}

/// Write a two-point table: columns `config,px,py,pz,t,re,im[,smear][,sink_op,source_op]`.
///
/// Every channel must have the same number of time slices `T` (the reader's time-axis rule).
pub fn write_twopt<W: Write>(data: &TwoPointData, w: W) -> Result<()> {
    check_configs(&data.configs)?;
    let n_cfg = data.configs.len();
    let n_t = data.channels.values().next().map_or(0, |s| s.n_t);
    for (key, series) in &data.channels {
        check_shape(series, n_cfg, n_t, &super::describe_twopt(key))?;
    }
    let with_smear = data.channels.keys().any(|k| k.smear.is_some());
    let with_ops = data.channels.keys().any(|k| k.ops.is_some());
    let mut out = csv::WriterBuilder::new()
        .buffer_capacity(1 << 16)
        .from_writer(w);
    let mut header = vec!["config", "px", "py", "pz", "t", "re", "im"];
    if with_smear {
        header.push("smear");
    }
    if with_ops {
        header.extend(["sink_op", "source_op"]);
    }
    out.write_record(&header).map_err(csv_error)?;
    let mut fields: Vec<String> = vec![String::new(); header.len()];
    for (key, series) in &data.channels {
        for (i, p) in key.momentum.iter().enumerate() {
            fields[1 + i] = p.to_string();
        }
        if with_smear {
            fields[7] = key.smear.clone().unwrap_or_default();
        }
        if with_ops {
            let at = 7 + usize::from(with_smear);
            write_ops(key.ops.as_ref(), &mut fields[at..]);
        }
        for t in 0..n_t {
            fields[4] = t.to_string();
            for (c, &config) in data.configs.iter().enumerate() {
                let i = series.index(t, c);
                fields[0] = config.to_string();
                fields[5].clear();
                format_float(series.re[i], &mut fields[5]);
                fields[6].clear();
                format_float(series.im[i], &mut fields[6]);
                out.write_record(&fields).map_err(csv_error)?;
            }
        }
    }
    out.flush().map_err(|e| Error::io(OUTPUT, e))
}

/// Write a three-point table: columns
/// `config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im[,flavor][,diagram]`
/// `[,sink_op,source_op]`.
///
/// Every channel must have `tsep + 1` insertion times (`tau = 0..=tsep`).
pub fn write_threept<W: Write>(data: &ThreePointData, w: W) -> Result<()> {
    check_configs(&data.configs)?;
    let n_cfg = data.configs.len();
    for (key, series) in &data.channels {
        check_shape(
            series,
            n_cfg,
            key.tsep as usize + 1,
            &super::describe_threept(key),
        )?;
    }
    let with_flavor = data.channels.keys().any(|k| k.flavor.is_some());
    let with_diagram = data.channels.keys().any(|k| k.diagram.is_some());
    let with_ops = data.channels.keys().any(|k| k.ops.is_some());
    let mut out = csv::WriterBuilder::new()
        .buffer_capacity(1 << 16)
        .from_writer(w);
    let mut header = vec!["config", "tsep", "tau"];
    header.extend(crate::data::CHANNEL_COLUMNS);
    header.extend(["re", "im"]);
    if with_flavor {
        header.push("flavor");
    }
    if with_diagram {
        header.push("diagram");
    }
    if with_ops {
        header.extend(["sink_op", "source_op"]);
    }
    out.write_record(&header).map_err(csv_error)?;
    let mut fields: Vec<String> = vec![String::new(); header.len()];
    for (key, series) in &data.channels {
        fields[1] = key.tsep.to_string();
        for i in 0..3 {
            fields[3 + i] = key.pf[i].to_string();
            fields[6 + i] = key.q[i].to_string();
        }
        fields[9] = key.current.name().to_string();
        fields[10] = key.projector.name().to_string();
        let mut extra = 13;
        if with_flavor {
            fields[extra] = key.flavor.clone().unwrap_or_default();
            extra += 1;
        }
        if with_diagram {
            fields[extra] = match key.diagram {
                Some(Diagram::Connected) => "connected".to_string(),
                Some(Diagram::Disconnected) => "disconnected".to_string(),
                None => String::new(),
            };
            extra += 1;
        }
        if with_ops {
            write_ops(key.ops.as_ref(), &mut fields[extra..]);
        }
        for tau in 0..series.n_t {
            fields[2] = tau.to_string();
            for (c, &config) in data.configs.iter().enumerate() {
                let i = series.index(tau, c);
                fields[0] = config.to_string();
                fields[11].clear();
                format_float(series.re[i], &mut fields[11]);
                fields[12].clear();
                format_float(series.im[i], &mut fields[12]);
                out.write_record(&fields).map_err(csv_error)?;
            }
        }
    }
    out.flush().map_err(|e| Error::io(OUTPUT, e))
}

/// The `sink_op`, `source_op` fields of a channel (empty for a channel without operators).
fn write_ops(ops: Option<&crate::data::Operators>, fields: &mut [String]) {
    let (a, b) = ops.map_or((String::new(), String::new()), |o| {
        (o.sink.clone(), o.source.clone())
    });
    fields[0] = a;
    fields[1] = b;
}

#[cfg(test)]
mod tests {
    use super::format_float;

    #[test]
    fn floats_round_trip_bit_for_bit() {
        for x in [
            0.0,
            -0.0,
            1.0,
            -2.5e-12,
            1.234_567_890_123_456_7e-4,
            9.99e-5,
            3.0e20,
            f64::MIN_POSITIVE,
            f64::MAX,
            0.1 + 0.2,
        ] {
            let mut s = String::new();
            format_float(x, &mut s);
            let back: f64 = s.parse().unwrap();
            assert_eq!(back.to_bits(), x.to_bits(), "{x} written as {s}");
        }
    }
}

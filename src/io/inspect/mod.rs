//! `formfactory inspect`: a terminal summary of a data directory or one correlator table,
//! with warnings for what looks wrong before any analysis is run.
//!
//! It exists so that an analyst sees at a glance what an ensemble contains (configurations,
//! momenta, `T`, `tsep` values, currents, projectors, labels) and whether the data need care:
//! non-positive two-point values at small `t`, configuration-number gaps, momenta of the
//! three-point table that the two-point table lacks, and autocorrelation in Monte Carlo time.
//! The integrated autocorrelation time of a few representative points is estimated by the
//! caller with `resample::autocorr_check` (the Gamma method with automatic windowing, U.
//! Wolff, Comput. Phys. Commun. 156 (2004) 143) and only written here.

mod scan;

pub use scan::{from_data, read, read_tables, Inspected};

use super::accumulator::Summary;
use crate::data::{norm2, sub, Momentum};
use crate::resample::autocorr_check::{CheckedPoint, PointAutocorr, TAU_INT_WARN, WINDOW_S};
use scan::{ThreeScan, TwoScan};
use std::collections::BTreeSet;
use std::fmt::Write as _;
use std::path::Path;

/// At most this many items are listed in one warning or summary line.
const LIST_MAX: usize = 8;

/// The summary for the terminal, with warnings; `autocorr` is the autocorrelation check of
/// the same data's [`Inspected::points`].
pub fn render(data: &Inspected, autocorr: &[PointAutocorr]) -> String {
    let (two, three) = (&data.two, &data.three);
    let mut out = String::new();
    let mut warnings = Vec::new();
    if let Some(d) = two {
        describe_twopt(&mut out, d);
        warnings.extend(d.channels.values().flat_map(|(_, w)| w.iter().cloned()));
        config_gaps(&d.configs, &d.name, &mut warnings);
    }
    if let Some(d) = three {
        describe_threept(&mut out, d);
        let same_configs = two.as_ref().is_some_and(|t| t.configs == d.configs);
        if !same_configs {
            config_gaps(&d.configs, &d.name, &mut warnings);
        }
    }
    if let (Some(d2), Some(d3)) = (two, three) {
        compare_tables(d2, d3, &mut warnings);
    }
    autocorrelation(&mut out, autocorr, &mut warnings);
    if warnings.is_empty() {
        out.push_str("warnings: none\n");
    } else {
        let _ = writeln!(out, "warnings ({}):", warnings.len());
        for w in &warnings {
            let _ = writeln!(out, "  - {w}");
        }
    }
    out
}

fn list<T: std::fmt::Display>(items: impl IntoIterator<Item = T>) -> String {
    let all: Vec<String> = items.into_iter().map(|x| x.to_string()).collect();
    if all.is_empty() {
        return "none".into();
    }
    let mut s = all[..all.len().min(LIST_MAX)].join(" ");
    if all.len() > LIST_MAX {
        let _ = write!(s, " ... ({} in all)", all.len());
    }
    s
}

fn mom(p: Momentum) -> String {
    format!("({},{},{})", p[0], p[1], p[2])
}

/// Configuration count, range and spacing.
fn configs_line(configs: &[i64]) -> String {
    let (Some(first), Some(last)) = (configs.first(), configs.last()) else {
        return "0".into();
    };
    let mut s = format!("{} ({first}..{last}", configs.len());
    if let Some(step) = usual_step(configs) {
        match configs.windows(2).filter(|w| w[1] - w[0] != step).count() {
            0 => {
                let _ = write!(s, ", step {step}, no gaps");
            }
            n => {
                let _ = write!(s, ", step {step}, {n} irregular spacing(s)");
            }
        }
    }
    s.push(')');
    s
}

/// The most common difference between consecutive configuration numbers (smallest on ties).
fn usual_step(configs: &[i64]) -> Option<i64> {
    let mut diffs: Vec<i64> = configs.windows(2).map(|w| w[1] - w[0]).collect();
    diffs.sort_unstable();
    let mut best: Option<(usize, i64)> = None;
    for chunk in diffs.chunk_by(|a, b| a == b) {
        if best.is_none_or(|(n, _)| chunk.len() > n) {
            best = Some((chunk.len(), chunk[0]));
        }
    }
    best.map(|(_, d)| d)
}

fn rows_line(out: &mut String, s: &Summary) {
    let _ = write!(out, "  rows: {}", s.rows);
    match s.sources {
        Some((lo, hi)) if lo == hi => {
            let _ = write!(out, " ({lo} source(s) averaged per value)");
        }
        Some((lo, hi)) => {
            let _ = write!(out, " ({lo} to {hi} sources averaged per value)");
        }
        None => {}
    }
    out.push('\n');
}

fn describe_twopt(out: &mut String, d: &TwoScan) {
    let _ = writeln!(out, "two-point table: {}", d.name.display());
    rows_line(out, &d.summary());
    let _ = writeln!(out, "  configurations: {}", configs_line(&d.configs));
    let momenta: BTreeSet<(i32, Momentum)> = d
        .channels
        .keys()
        .map(|k| (norm2(k.momentum), k.momentum))
        .collect();
    let smears: BTreeSet<&str> = d
        .channels
        .keys()
        .filter_map(|k| k.smear.as_deref())
        .collect();
    let n_t = d.channels.values().next().map_or(0, |(n_t, _)| *n_t);
    let _ = writeln!(out, "  channels: {}, T = {n_t}", d.channels.len());
    let _ = writeln!(
        out,
        "  momenta ({}): {}",
        momenta.len(),
        list(momenta.iter().map(|(_, p)| mom(*p)))
    );
    let _ = writeln!(out, "  smear labels: {}", list(&smears));
}

fn describe_threept(out: &mut String, d: &ThreeScan) {
    let _ = writeln!(out, "three-point table: {}", d.name.display());
    rows_line(out, &d.summary());
    let _ = writeln!(out, "  configurations: {}", configs_line(&d.configs));
    let keys = d.channels.keys();
    let tseps: BTreeSet<u32> = keys.clone().map(|k| k.tsep).collect();
    let currents: BTreeSet<_> = keys.clone().map(|k| k.current).collect();
    let projectors: BTreeSet<_> = keys.clone().map(|k| k.projector).collect();
    let flavors: BTreeSet<&str> = keys.clone().filter_map(|k| k.flavor.as_deref()).collect();
    let diagrams: BTreeSet<&str> = keys
        .clone()
        .filter_map(|k| k.diagram)
        .map(|g| match g {
            crate::data::Diagram::Connected => "connected",
            crate::data::Diagram::Disconnected => "disconnected",
        })
        .collect();
    let sinks: BTreeSet<(i32, Momentum)> = keys.clone().map(|k| (norm2(k.pf), k.pf)).collect();
    let qs: BTreeSet<(i32, Momentum)> = keys.clone().map(|k| (norm2(k.q), k.q)).collect();
    let _ = writeln!(
        out,
        "  channels: {}, tsep: {}",
        d.channels.len(),
        list(&tseps)
    );
    let _ = writeln!(out, "  currents: {}", list(&currents));
    let _ = writeln!(out, "  projectors: {}", list(&projectors));
    let _ = writeln!(
        out,
        "  flavors: {}; diagrams: {}",
        list(&flavors),
        list(&diagrams)
    );
    let _ = writeln!(
        out,
        "  sink momenta p_f ({}): {}",
        sinks.len(),
        list(sinks.iter().map(|(_, p)| mom(*p)))
    );
    let _ = writeln!(
        out,
        "  current momenta q ({}): {}",
        qs.len(),
        list(qs.iter().map(|(_, p)| mom(*p)))
    );
}

fn config_gaps(configs: &[i64], name: &Path, warnings: &mut Vec<String>) {
    let Some(step) = usual_step(configs) else {
        return;
    };
    let odd: Vec<String> = configs
        .windows(2)
        .filter(|w| w[1] - w[0] != step)
        .map(|w| format!("{}->{}", w[0], w[1]))
        .collect();
    if !odd.is_empty() {
        warnings.push(format!(
            "{}: configuration numbers mostly step by {step} but not at {}; missing \
             configurations or mixed streams?",
            name.display(),
            list(&odd)
        ));
    }
}

/// Configuration mismatch and three-point momenta without a two-point partner.
fn compare_tables(d2: &TwoScan, d3: &ThreeScan, warnings: &mut Vec<String>) {
    let (n2, n3) = (&d2.name, &d3.name);
    if d2.configs != d3.configs {
        let only2 = super::difference(&d2.configs, &d3.configs);
        let only3 = super::difference(&d3.configs, &d2.configs);
        warnings.push(format!(
            "the tables cover different configurations: only in {}: {}; only in {}: {}; \
             an analysis must be asked to keep only the common ones",
            n2.display(),
            list(&only2),
            n3.display(),
            list(&only3)
        ));
    }
    let have: BTreeSet<Momentum> = d2.channels.keys().map(|k| k.momentum).collect();
    let mut lacking = BTreeSet::new();
    for k in d3.channels.keys() {
        for (role, p) in [("sink", k.pf), ("source", sub(k.pf, k.q))] {
            if !have.contains(&p) {
                lacking.insert((norm2(p), p, role));
            }
        }
    }
    if !lacking.is_empty() {
        warnings.push(format!(
            "momenta of the three-point table absent from the two-point table: {}",
            list(
                lacking
                    .iter()
                    .map(|(_, p, role)| format!("{} ({role})", mom(*p)))
            )
        ));
    }
}

/// The integrated autocorrelation times of the representative points, with a warning where
/// binning is advised.
fn autocorrelation(out: &mut String, points: &[PointAutocorr], warnings: &mut Vec<String>) {
    if points.is_empty() {
        return;
    }
    let _ = writeln!(
        out,
        "autocorrelation in Monte Carlo time (Gamma method, Wolff 2004, S = {WINDOW_S}):"
    );
    for p in points {
        let name = point_name(&p.point);
        match &p.result {
            Ok(r) => {
                let _ = writeln!(
                    out,
                    "  {name}: tau_int = {:.2} +- {:.2} (window {})",
                    r.tau_int, r.tau_int_error, r.window
                );
                warnings.extend(r.warnings.iter().map(|w| format!("{name}: {w}")));
                if p.binning_advised() {
                    warnings.push(format!(
                        "{name}: tau_int = {:.2} > {TAU_INT_WARN}; bin the configurations \
                         (bin size of a few tau_int) before resampling",
                        r.tau_int
                    ));
                }
            }
            Err(e) => {
                let _ = writeln!(out, "  {name}: not estimated ({e})");
            }
        }
    }
}

/// A representative point in words: `Re C2 <channel> t=3`, `Im C3 <channel> tau=4`.
pub(crate) fn point_name(p: &CheckedPoint) -> String {
    match p {
        CheckedPoint::TwoPoint { key, t } => format!("Re C2 {} t={t}", super::describe_twopt(key)),
        CheckedPoint::ThreePoint {
            key,
            tau,
            imaginary,
        } => {
            let part = if *imaginary { "Im" } else { "Re" };
            format!("{part} C3 {} tau={tau}", super::describe_threept(key))
        }
    }
}

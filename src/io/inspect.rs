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

use super::accumulator::Summary;
use super::table::{display_name, open};
use super::{threept, twopt};
use crate::data::{
    norm2, sub, Momentum, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use crate::error::{Error, Result};
use crate::resample::autocorr_check::{
    replaces_twopt_choice, threept_history, twopt_histories, CheckedPoint, PointAutocorr,
    TAU_INT_WARN, WINDOW_S,
};
use std::collections::{BTreeMap, BTreeSet};
use std::fmt::Write as _;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};

/// Two-point values are checked for positivity at `t < SMALL_T`.
const SMALL_T: usize = 3;
/// At most this many items are listed in one warning or summary line.
const LIST_MAX: usize = 8;

/// What `formfactory inspect` describes: for each table read, its origin, size,
/// configurations and channel keys, the warnings about each channel's values, and the
/// Monte Carlo histories of the representative points (`resample::autocorr_check`). The
/// values themselves are not kept: a packed file is walked one channel at a time into one
/// reused buffer ([`read`]), so memory does not grow with the number of channels.
pub struct Inspected {
    two: Option<TwoScan>,
    three: Option<ThreeScan>,
}

impl Inspected {
    /// The representative points with their Monte Carlo histories, for the autocorrelation
    /// check (`resample::autocorr_check::check_points`; the same points as `check` on the
    /// whole data).
    pub fn points(&self) -> Vec<(CheckedPoint<'_>, &[f64])> {
        let mut points = Vec::new();
        if let Some((key, histories)) = self.two.as_ref().and_then(|t| t.chosen.as_ref()) {
            for (t, x) in histories {
                points.push((CheckedPoint::TwoPoint { key, t: *t }, x.as_slice()));
            }
        }
        if let Some((key, (tau, imaginary, x))) =
            self.three.as_ref().and_then(|t| t.chosen.as_ref())
        {
            let point = CheckedPoint::ThreePoint {
                key,
                tau: *tau,
                imaginary: *imaginary,
            };
            points.push((point, x.as_slice()));
        }
        points
    }
}

/// The Monte Carlo histories of the checked two-point times, `(t, history)`.
type Histories = Vec<(usize, Vec<f64>)>;

/// The checked three-point point, `(tau, imaginary, history)`.
type ThreePointHistory = (usize, bool, Vec<f64>);

/// What inspect keeps of a two-point table, filled channel by channel ([`TwoScan::add`]).
struct TwoScan {
    name: PathBuf,
    /// The reader's count of rows, or `None` to count the values (HDF5 input).
    summary: Option<Summary>,
    configs: Vec<i64>,
    /// Every channel: its number of time slices and the warnings about its values.
    channels: BTreeMap<TwoPointKey, (usize, Vec<String>)>,
    /// The channel whose points the autocorrelation check looks at, with their histories.
    chosen: Option<(TwoPointKey, Histories)>,
}

impl TwoScan {
    fn new(name: PathBuf, summary: Option<Summary>, configs: Vec<i64>) -> Self {
        TwoScan {
            name,
            summary,
            configs,
            channels: BTreeMap::new(),
            chosen: None,
        }
    }

    /// Take what inspect needs of one channel (a later channel of an equal key replaces the
    /// earlier, as in the data model's map).
    fn add(&mut self, key: TwoPointKey, s: &Series) {
        let warnings = twopt_warnings(&key, s);
        if replaces_twopt_choice(&key, self.chosen.as_ref().map(|c| &c.0)) {
            self.chosen = Some((key.clone(), twopt_histories(s)));
        }
        self.channels.insert(key, (s.n_t, warnings));
    }

    fn from_data(name: PathBuf, summary: Option<Summary>, d: TwoPointData) -> Self {
        let mut scan = TwoScan::new(name, summary, d.configs);
        for (key, s) in d.channels {
            scan.add(key, &s);
        }
        scan
    }

    fn summary(&self) -> Summary {
        self.summary.unwrap_or_else(|| {
            let n = self.configs.len();
            values_summary(self.channels.values().map(|(n_t, _)| n_t * n))
        })
    }
}

/// What inspect keeps of a three-point table, filled channel by channel.
struct ThreeScan {
    name: PathBuf,
    /// As in [`TwoScan`].
    summary: Option<Summary>,
    configs: Vec<i64>,
    /// Every channel with its number of time slices.
    channels: BTreeMap<ThreePointKey, usize>,
    /// The first channel in key order with its checked point `(tau, imaginary, history)`.
    chosen: Option<(ThreePointKey, ThreePointHistory)>,
}

impl ThreeScan {
    fn new(name: PathBuf, summary: Option<Summary>, configs: Vec<i64>) -> Self {
        ThreeScan {
            name,
            summary,
            configs,
            channels: BTreeMap::new(),
            chosen: None,
        }
    }

    fn add(&mut self, key: ThreePointKey, s: &Series) {
        if self.chosen.as_ref().is_none_or(|c| key <= c.0) {
            self.chosen = Some((key.clone(), threept_history(s)));
        }
        self.channels.insert(key, s.n_t);
    }

    fn from_data(name: PathBuf, summary: Option<Summary>, d: ThreePointData) -> Self {
        let mut scan = ThreeScan::new(name, summary, d.configs);
        for (key, s) in d.channels {
            scan.add(key, &s);
        }
        scan
    }

    fn summary(&self) -> Summary {
        self.summary.unwrap_or_else(|| {
            let n = self.configs.len();
            values_summary(self.channels.values().map(|n_t| n_t * n))
        })
    }
}

/// The number of values in place of rows (HDF5 input has no rows).
fn values_summary(per_channel: impl Iterator<Item = usize>) -> Summary {
    Summary {
        rows: per_channel.sum::<usize>() as u64,
        sources: None,
    }
}

/// Read a data directory (`twopt.csv` and/or `threept.csv` inside), one table (its kind told
/// by its header; `-` reads standard input) or a packed HDF5 file. A packed file is walked
/// channel by channel (one channel's values in memory at a time); CSV tables are read whole
/// first (their rows need not be grouped by channel), then scanned.
pub fn read(path: &Path) -> Result<Inspected> {
    if path != Path::new("-") && !path.is_dir() && super::hdf5::looks_like_hdf5(path) {
        return stream_packed(path);
    }
    let (two, three) = load(path)?;
    Ok(Inspected {
        two: two.map(|(name, d, s)| TwoScan::from_data(name, Some(s), d)),
        three: three.map(|(name, d, s)| ThreeScan::from_data(name, Some(s), d)),
    })
}

/// Data already read (e.g. from an HDF5 source), `name` standing for its origin.
pub fn from_data(name: &Path, two: TwoPointData, three: ThreePointData) -> Inspected {
    Inspected {
        two: Some(TwoScan::from_data(name.to_path_buf(), None, two)),
        three: Some(ThreeScan::from_data(name.to_path_buf(), None, three)),
    }
}

/// Walk a packed file one channel at a time (`hdf5::visit_packed`), keeping what
/// [`Inspected`] holds; the same result as [`from_data`] on the whole file.
fn stream_packed(path: &Path) -> Result<Inspected> {
    struct Visit(TwoScan, ThreeScan);
    impl super::hdf5::PackedVisitor for Visit {
        fn configs(&mut self, configs: &[i64]) -> Result<()> {
            self.0.configs = configs.to_vec();
            self.1.configs = configs.to_vec();
            Ok(())
        }
        fn twopt(&mut self, key: TwoPointKey, series: &mut Series) -> Result<()> {
            self.0.add(key, series);
            Ok(())
        }
        fn threept(&mut self, key: ThreePointKey, series: &mut Series) -> Result<()> {
            self.1.add(key, series);
            Ok(())
        }
    }
    let name = path.to_path_buf();
    let mut visit = Visit(
        TwoScan::new(name.clone(), None, Vec::new()),
        ThreeScan::new(name, None, Vec::new()),
    );
    super::hdf5::visit_packed(path, &mut visit)?;
    Ok(Inspected {
        two: Some(visit.0),
        three: Some(visit.1),
    })
}

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

type Loaded<D> = Option<(PathBuf, D, Summary)>;

/// Read what `path` names: a directory with the standard file names, or one CSV table.
fn load(path: &Path) -> Result<(Loaded<TwoPointData>, Loaded<ThreePointData>)> {
    if path != Path::new("-") && path.is_dir() {
        let (p2, p3) = (path.join("twopt.csv"), path.join("threept.csv"));
        if !p2.exists() && !p3.exists() {
            return Err(Error::Table {
                path: path.to_path_buf(),
                message: "directory holds neither twopt.csv nor threept.csv".into(),
            });
        }
        let two = if p2.exists() {
            let (d, s) = twopt::read_with_summary(&p2)?;
            Some((p2, d, s))
        } else {
            None
        };
        let three = if p3.exists() {
            let (d, s) = threept::read_with_summary(&p3)?;
            Some((p3, d, s))
        } else {
            None
        };
        return Ok((two, three));
    }
    let name = display_name(path);
    let mut input = BufReader::new(open(path)?);
    let mut header = Vec::new();
    // The header is read on its own to tell the table's kind; a line longer than any real
    // header is not read whole (the reader reports it).
    (&mut input)
        .take(1 << 16)
        .read_until(b'\n', &mut header)
        .map_err(|e| Error::io(&name, e))?;
    if header.is_empty() {
        return Err(Error::Table {
            path: name,
            message: "the file is empty; expected a header line naming the columns of a \
                      two- or three-point table"
                .into(),
        });
    }
    let names: Vec<String> = String::from_utf8_lossy(&header)
        .trim_start_matches('\u{feff}')
        .trim_end()
        .split(',')
        .map(|s| s.trim_matches('"').to_string())
        .collect();
    let has = |n: &str| names.iter().any(|x| x == n);
    let whole = std::io::Cursor::new(header.clone()).chain(input);
    if has("tau") || has("tsep") {
        let (d, s) = threept::read_inner(whole, name.clone())?;
        Ok((None, Some((name, d, s))))
    } else if has("t") {
        let (d, s) = twopt::read_inner(whole, name.clone())?;
        Ok((Some((name, d, s)), None))
    } else {
        Err(Error::Table {
            path: name,
            message: "cannot tell the kind of table from its header: a two-point table has a \
                      `t` column, a three-point table `tsep` and `tau` columns"
                .into(),
        })
    }
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

/// Non-positive real parts at small `t` in one channel: the mean in any channel, single
/// configurations at zero momentum.
fn twopt_warnings(key: &TwoPointKey, s: &Series) -> Vec<String> {
    let mut warnings = Vec::new();
    let name = super::describe_twopt(key);
    for t in 0..s.n_t.min(SMALL_T) {
        let re = s.re_at(t);
        let mean = re.iter().sum::<f64>() / re.len().max(1) as f64;
        if mean <= 0.0 {
            warnings.push(format!(
                "two-point {name}: mean Re C2 at t={t} is {mean:e} (<= 0); a two-point \
                 function should be positive at small t - check sign or phase"
            ));
        } else if key.momentum == [0, 0, 0] {
            let bad = re.iter().filter(|&&x| x <= 0.0).count();
            if bad > 0 {
                warnings.push(format!(
                    "two-point {name}: {bad} configuration(s) have Re C2 <= 0 at t={t}"
                ));
            }
        }
    }
    warnings
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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{Current, Projector};
    use crate::resample::autocorr_check::{check, check_points};

    /// Two-point channels at momenta (0,0,k) and (1,0,0), three-point channels at two
    /// `tsep`; values varied by channel, time and configuration (some negative at t = 1).
    fn data() -> (TwoPointData, ThreePointData) {
        let n_cfg = 40;
        let configs: Vec<i64> = (0..n_cfg as i64).collect();
        let fill = |n_t: usize, seed: usize| {
            let mut s = Series::zeros(n_t, n_cfg);
            for (i, (re, im)) in s.re.iter_mut().zip(s.im.iter_mut()).enumerate() {
                let x = ((i * 7919 + seed * 104729) % 1013) as f64 / 1013.0;
                *re = if seed == 2 && i % 9 == 0 { -x } else { 0.5 + x };
                *im = x - 0.5;
            }
            s
        };
        let mut two = TwoPointData {
            configs: configs.clone(),
            channels: BTreeMap::new(),
        };
        for (i, p) in [[1, 0, 0], [0, 0, 1], [0, 0, 0], [-1, 0, 0]]
            .into_iter()
            .enumerate()
        {
            let key = TwoPointKey {
                momentum: p,
                smear: None,
                ops: None,
            };
            two.channels.insert(key, fill(12, i));
        }
        let mut three = ThreePointData {
            configs,
            channels: BTreeMap::new(),
        };
        for (i, tsep) in [8u32, 4, 6].into_iter().enumerate() {
            let key = ThreePointKey {
                tsep,
                pf: [0, 0, 0],
                q: [0, 0, i as i32],
                current: Current::V4,
                projector: Projector::Unpol,
                flavor: None,
                diagram: None,
                ops: None,
            };
            three.channels.insert(key, fill(tsep as usize + 1, 10 + i));
        }
        (two, three)
    }

    /// The channels given one at a time in reverse key order (a reader's file order need not
    /// be key order) give the text of the whole data, whose autocorrelation check is run on
    /// the whole data as before streaming.
    #[test]
    fn channels_in_any_order_give_the_text_of_the_whole_data() {
        let (two, three) = data();
        let name = Path::new("x.h5");
        let mut t = TwoScan::new(name.into(), None, two.configs.clone());
        for (k, s) in two.channels.iter().rev() {
            t.add(k.clone(), s);
        }
        let mut u = ThreeScan::new(name.into(), None, three.configs.clone());
        for (k, s) in three.channels.iter().rev() {
            u.add(k.clone(), s);
        }
        let streamed = Inspected {
            two: Some(t),
            three: Some(u),
        };
        let text = render(&streamed, &check_points(streamed.points()));
        let autocorr = check(Some(&two), Some(&three));
        let whole = render(&from_data(name, two.clone(), three.clone()), &autocorr);
        assert_eq!(text, whole);
        // the zero-momentum channel was chosen though it is neither first nor last
        assert!(text.contains("Re C2 p=(0,0,0)"), "{text}");
        assert!(text.contains("configuration(s) have Re C2 <= 0"), "{text}");
        assert!(text.contains("rows: 1920"), "{text}");
    }
}

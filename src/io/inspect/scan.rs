//! The channel-by-channel scan behind `formfactory inspect`: what the text needs of each
//! table, taken one channel at a time so that neither a packed file nor a CSV table grouped
//! by channel is held whole.

use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::error::{Error, Result};
use crate::io::accumulator::Summary;
use crate::io::table::{display_name, open};
use crate::io::{threept, twopt};
use crate::resample::autocorr_check::{
    replaces_twopt_choice, threept_history, twopt_histories, CheckedPoint,
};
use std::collections::BTreeMap;
use std::io::{BufRead, BufReader, Read};
use std::path::{Path, PathBuf};
/// Two-point values are checked for positivity at `t < SMALL_T`.
const SMALL_T: usize = 3;

/// What `formfactory inspect` describes: for each table read, its origin, size,
/// configurations and channel keys, the warnings about each channel's values, and the
/// Monte Carlo histories of the representative points (`resample::autocorr_check`). The
/// values themselves are not kept: a packed file and a CSV table grouped by channel are read
/// one channel at a time into one reused buffer ([`read`]), so memory does not grow with the
/// data.
pub struct Inspected {
    pub(super) two: Option<TwoScan>,
    pub(super) three: Option<ThreeScan>,
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
pub(super) struct TwoScan {
    pub(super) name: PathBuf,
    /// The reader's count of rows, or `None` to count the values (HDF5 input).
    pub(super) summary: Option<Summary>,
    pub(super) configs: Vec<i64>,
    /// Every channel: its number of time slices and the warnings about its values.
    pub(super) channels: BTreeMap<TwoPointKey, (usize, Vec<String>)>,
    /// The channel whose points the autocorrelation check looks at, with their histories.
    pub(super) chosen: Option<(TwoPointKey, Histories)>,
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

    pub(super) fn summary(&self) -> Summary {
        self.summary.unwrap_or_else(|| {
            let n = self.configs.len();
            values_summary(self.channels.values().map(|(n_t, _)| n_t * n))
        })
    }
}

/// What inspect keeps of a three-point table, filled channel by channel.
pub(super) struct ThreeScan {
    pub(super) name: PathBuf,
    /// As in [`TwoScan`].
    pub(super) summary: Option<Summary>,
    pub(super) configs: Vec<i64>,
    /// Every channel with its number of time slices.
    pub(super) channels: BTreeMap<ThreePointKey, usize>,
    /// The first channel in key order with its checked point `(tau, imaginary, history)`.
    pub(super) chosen: Option<(ThreePointKey, ThreePointHistory)>,
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

    pub(super) fn summary(&self) -> Summary {
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
/// by its header; `-` reads standard input) or a packed HDF5 file, one channel at a time
/// (`hdf5::visit_packed`, `io::twopt_by_channel`): the values of one channel in memory at a
/// time, unless a CSV table is not grouped by channel or comes from standard input (then it
/// is read whole first, as before).
pub fn read(path: &Path) -> Result<Inspected> {
    if path == Path::new("-") {
        // standard input cannot be read again should the table turn out not to be grouped
        let (two, three) = load(path)?;
        return Ok(Inspected {
            two: two.map(|(name, d, s)| TwoScan::from_data(name, Some(s), d)),
            three: three.map(|(name, d, s)| ThreeScan::from_data(name, Some(s), d)),
        });
    }
    if !path.is_dir() && crate::io::hdf5::looks_like_hdf5(path) {
        return stream_packed(path);
    }
    let (p2, p3) = match path.is_dir() {
        true => {
            let (p2, p3) = (path.join("twopt.csv"), path.join("threept.csv"));
            if !p2.exists() && !p3.exists() {
                return Err(no_tables(path));
            }
            (p2.exists().then_some(p2), p3.exists().then_some(p3))
        }
        false => match table_kind(path, &mut BufReader::new(open(path)?))?.0 {
            Kind::Two => (Some(path.to_path_buf()), None),
            Kind::Three => (None, Some(path.to_path_buf())),
        },
    };
    let (two, three) = (
        p2.map(|p| stream_twopt(&p, &p, true)).transpose()?,
        p3.map(|p| stream_threept(&p, &p, true)).transpose()?,
    );
    Ok(Inspected { two, three })
}

/// The two CSV tables of a pipeline's `data` section, read one channel at a time, with
/// `name` (the pipeline file) as their origin and values counted in place of rows, as
/// [`from_data`] on what `io::read_dataset` reads. `None` when the tables cover different
/// configurations and `opts` keeps the common ones (the values must then be cut to them:
/// read the data whole); tables on different configurations otherwise give
/// `io::read_dataset`'s error.
pub fn read_tables(
    name: &Path,
    twopt: &Path,
    threept: &Path,
    opts: &crate::io::ReadOptions,
) -> Result<Option<Inspected>> {
    let mut two = stream_twopt(twopt, name, false)?;
    let mut three = stream_threept(threept, name, false)?;
    if two.configs != three.configs {
        // only the configurations matter to the rule (and to its message)
        let two_data = TwoPointData {
            configs: two.configs.clone(),
            channels: BTreeMap::new(),
        };
        let three_data = ThreePointData {
            configs: three.configs.clone(),
            channels: BTreeMap::new(),
        };
        crate::io::on_common_configs(two_data, twopt, three_data, threept, Vec::new(), opts)?;
        return Ok(None);
    }
    two.summary = None;
    three.summary = None;
    Ok(Some(Inspected {
        two: Some(two),
        three: Some(three),
    }))
}

/// A two-point table read one channel at a time into what inspect keeps, under `name`;
/// `rows` keeps the reader's row count (else values are counted).
fn stream_twopt(path: &Path, name: &Path, rows: bool) -> Result<TwoScan> {
    let init = || TwoScan::new(name.to_path_buf(), None, Vec::new());
    let read = crate::io::twopt_by_channel(path, init, |scan, key, s| {
        scan.add(key.clone(), s);
        Ok(())
    })?;
    let mut scan = read.state;
    scan.configs = read.configs;
    scan.summary = rows.then_some(read.summary);
    Ok(scan)
}

/// A three-point table read one channel at a time, as [`stream_twopt`].
fn stream_threept(path: &Path, name: &Path, rows: bool) -> Result<ThreeScan> {
    let init = || ThreeScan::new(name.to_path_buf(), None, Vec::new());
    let read = crate::io::threept_by_channel(path, init, |scan, key, s| {
        scan.add(key.clone(), s);
        Ok(())
    })?;
    let mut scan = read.state;
    scan.configs = read.configs;
    scan.summary = rows.then_some(read.summary);
    Ok(scan)
}

fn no_tables(path: &Path) -> Error {
    Error::Table {
        path: path.to_path_buf(),
        message: "directory holds neither twopt.csv nor threept.csv".into(),
    }
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
    impl crate::io::hdf5::PackedVisitor for Visit {
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
    crate::io::hdf5::visit_packed(path, &mut visit)?;
    Ok(Inspected {
        two: Some(visit.0),
        three: Some(visit.1),
    })
}

type Loaded<D> = Option<(PathBuf, D, Summary)>;

/// Read one CSV table whole (standard input, which cannot be read twice).
fn load(path: &Path) -> Result<(Loaded<TwoPointData>, Loaded<ThreePointData>)> {
    let name = display_name(path);
    let mut input = BufReader::new(open(path)?);
    let (kind, header) = table_kind(path, &mut input)?;
    let whole = std::io::Cursor::new(header).chain(input);
    match kind {
        Kind::Three => {
            let (d, s) = threept::read_inner(whole, name.clone())?;
            Ok((None, Some((name, d, s))))
        }
        Kind::Two => {
            let (d, s) = twopt::read_inner(whole, name.clone())?;
            Ok((Some((name, d, s)), None))
        }
    }
}

/// The kind of a table.
enum Kind {
    Two,
    Three,
}

/// The kind of the table `path` told by its header, read from `input` (returned with it).
fn table_kind(path: &Path, input: &mut impl BufRead) -> Result<(Kind, Vec<u8>)> {
    let name = display_name(path);
    let mut header = Vec::new();
    // The header is read on its own to tell the table's kind; a line longer than any real
    // header is not read whole (the reader reports it).
    input
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
    if has("tau") || has("tsep") {
        Ok((Kind::Three, header))
    } else if has("t") {
        Ok((Kind::Two, header))
    } else {
        Err(Error::Table {
            path: name,
            message: "cannot tell the kind of table from its header: a two-point table has a \
                      `t` column, a three-point table `tsep` and `tau` columns"
                .into(),
        })
    }
}

/// Non-positive real parts at small `t` in one channel: the mean in any channel, single
/// configurations at zero momentum.
fn twopt_warnings(key: &TwoPointKey, s: &Series) -> Vec<String> {
    let mut warnings = Vec::new();
    let name = crate::io::describe_twopt(key);
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

#[cfg(test)]
mod tests {
    use super::super::render;
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

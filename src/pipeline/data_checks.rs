//! Checks on the correlator values themselves, made once after reading: a channel that never
//! fluctuates (all zeros, or one constant) and values whose squares leave double precision.
//!
//! Why it exists: both cases used to pass the reader and surface later as a "zero variance"
//! fit error far from their cause, or as an empty result with exit code 0.
//!
//! Both checks need only two facts per channel ([`ValueFacts`]: the largest magnitude, and
//! the value if it never changes), so `formfactory check` of a packed file takes them while
//! it walks the file one channel at a time ([`Shapes`]) and keeps no values at all.

use crate::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use crate::ratio::ChannelKey;
use crate::{Error, Result};
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::path::Path;

/// What the value checks need of one channel.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct ValueFacts {
    /// The largest magnitude of any real or imaginary part (0 for no values).
    largest: f64,
    /// The value (real, imaginary) if it is the same on every configuration at every time.
    constant: Option<(f64, f64)>,
}

impl ValueFacts {
    /// The facts of a series' values.
    pub fn of(s: &Series) -> Self {
        ValueFacts::of_parts(&s.re, &s.im)
    }

    /// The facts of the real parts `re` and imaginary parts `im` of one channel.
    fn of_parts(re: &[f64], im: &[f64]) -> Self {
        ValueFacts {
            largest: largest_magnitude(re).max(largest_magnitude(im)),
            constant: constant_value(re, im),
        }
    }
}

/// The largest `|x|` (0 for none): eight running maxima, which vectorise, give the one of a
/// plain fold, since a maximum is one of the values whatever the order (and `f64::max`
/// passes over NaN either way).
fn largest_magnitude(x: &[f64]) -> f64 {
    let mut lanes = [0.0f64; 8];
    let mut chunks = x.chunks_exact(8);
    for c in &mut chunks {
        for (l, v) in lanes.iter_mut().zip(c) {
            *l = l.max(v.abs());
        }
    }
    chunks
        .remainder()
        .iter()
        .chain(&lanes)
        .fold(0.0_f64, |m, v| m.max(v.abs()))
}

/// The value facts of every channel, taken while the data were read (see [`Shapes`]).
#[derive(Debug, Default)]
pub(crate) struct Facts {
    two: BTreeMap<TwoPointKey, ValueFacts>,
    three: BTreeMap<ThreePointKey, ValueFacts>,
}

/// A walk over a packed file that keeps the data's shape and no values: every channel as a
/// series with its `n_t` and `n_cfg` and empty `re` / `im` (to be given only to checks that
/// read keys, shapes and configurations), beside its [`ValueFacts`]. A two-point channel's
/// facts cover its first `t_extent` time slices, what the reader's cut to the ensemble's `T`
/// keeps.
pub(crate) struct Shapes {
    pub two: TwoPointData,
    pub three: ThreePointData,
    pub facts: Facts,
    t_extent: Option<usize>,
}

impl Shapes {
    pub fn new(t_extent: Option<usize>) -> Self {
        Shapes {
            two: TwoPointData::default(),
            three: ThreePointData::default(),
            facts: Facts::default(),
            t_extent,
        }
    }
}

impl Shapes {
    /// The shapes of a two-point and a three-point table read one after the other, each into
    /// its own [`Shapes`], on their own configurations.
    pub fn of_tables(
        two: crate::io::ByChannel<Shapes>,
        three: crate::io::ByChannel<Shapes>,
    ) -> Self {
        let mut shapes = two.state;
        shapes.two.configs = two.configs;
        shapes.three = three.state.three;
        shapes.three.configs = three.configs;
        shapes.facts.three = three.state.facts.three;
        shapes
    }
}

/// A series' shape without its values.
fn shape_of(s: &Series) -> Series {
    Series {
        n_cfg: s.n_cfg,
        n_t: s.n_t,
        re: Vec::new(),
        im: Vec::new(),
    }
}

impl crate::io::hdf5::PackedVisitor for Shapes {
    fn configs(&mut self, configs: &[i64]) -> Result<()> {
        self.two.configs = configs.to_vec();
        self.three.configs = configs.to_vec();
        Ok(())
    }

    fn twopt(&mut self, key: TwoPointKey, s: &mut Series) -> Result<()> {
        let kept = self.t_extent.map_or(s.n_t, |t| t.min(s.n_t)) * s.n_cfg;
        let facts = ValueFacts::of_parts(&s.re[..kept], &s.im[..kept]);
        self.facts.two.insert(key.clone(), facts);
        self.two.channels.insert(key, shape_of(s));
        Ok(())
    }

    fn threept(&mut self, key: ThreePointKey, s: &mut Series) -> Result<()> {
        self.facts.three.insert(key.clone(), ValueFacts::of(s));
        self.three.channels.insert(key, shape_of(s));
        Ok(())
    }
}

/// Values whose largest magnitude is below this underflow when squared and summed into a
/// variance; above [`LARGEST_SCALE`] they overflow (double precision ranges over about
/// 1e±308, so squares need magnitudes within about 1e±150; the margin covers the sums).
const SMALLEST_SCALE: f64 = 1e-100;
/// See [`SMALLEST_SCALE`].
const LARGEST_SCALE: f64 = 1e100;

/// Each channel's [`ValueFacts`] in channel order: the `known` ones where given, else taken
/// from the values, channels in parallel (each alone, so the same facts whatever the threads).
fn facts_in_order<K: Ord + Sync>(
    channels: &BTreeMap<K, Series>,
    known: Option<&BTreeMap<K, ValueFacts>>,
) -> Vec<ValueFacts> {
    channels
        .par_iter()
        .map(|(key, s)| {
            known
                .and_then(|k| k.get(key).copied())
                .unwrap_or_else(|| ValueFacts::of(s))
        })
        .collect()
}

/// Refuse a table whose values are all tiny or huge, and a channel that is the same on every
/// configuration at every time. `facts` are the channels' [`ValueFacts`] when the data hold
/// only shapes ([`Shapes`]); without them they are taken from the values.
pub fn check_values(
    two: &TwoPointData,
    twopt_path: &Path,
    three: &ThreePointData,
    threept_path: &Path,
    facts: Option<&Facts>,
) -> Result<()> {
    // Each channel's facts once, then the checks in channel order.
    let two_facts = facts_in_order(&two.channels, facts.map(|f| &f.two));
    let three_facts = facts_in_order(&three.channels, facts.map(|f| &f.three));
    let largest = |all: &[ValueFacts]| all.iter().fold(0.0_f64, |m, f| m.max(f.largest));
    check_scale(largest(&two_facts), twopt_path)?;
    check_scale(largest(&three_facts), threept_path)?;
    for ((key, s), f) in two.channels.iter().zip(&two_facts) {
        if let Some(v) = f.constant {
            let smear = key
                .smear
                .as_deref()
                .map_or(String::new(), |s| format!(", smear {s}"));
            return Err(constant_error(
                twopt_path,
                &format!("two-point channel p = {:?}{smear}", key.momentum),
                v,
                s.n_cfg,
            ));
        }
    }
    for ((key, s), f) in three.channels.iter().zip(&three_facts) {
        if let Some(v) = f.constant {
            return Err(constant_error(
                threept_path,
                &format!(
                    "three-point channel {} at tsep {}",
                    ChannelKey::of(key),
                    key.tsep
                ),
                v,
                s.n_cfg,
            ));
        }
    }
    Ok(())
}

fn constant_error(path: &Path, what: &str, v: (f64, f64), n_cfg: usize) -> Error {
    let value = if v == (0.0, 0.0) {
        "every value is zero".to_string()
    } else {
        format!("every value is {} + {}i", v.0, v.1)
    };
    Error::Table {
        path: path.to_path_buf(),
        message: format!(
            "{what} does not fluctuate: {value} on all {n_cfg} configurations at every time, \
             so it carries no signal and no error; check the contraction output, or remove the \
             channel from the table"
        ),
    }
}

/// The value of a series (real parts `re`, imaginary parts `im`) that is the same on every
/// configuration at every time, or `None` if anything varies.
fn constant_value(re: &[f64], im: &[f64]) -> Option<(f64, f64)> {
    let (re0, im0) = (*re.first()?, *im.first()?);
    let same = re.iter().all(|&x| x == re0) && im.iter().all(|&x| x == im0);
    same.then_some((re0, im0))
}

/// Refuse a table whose largest magnitude is `largest` if its variances would leave double
/// precision.
fn check_scale(largest: f64, path: &Path) -> Result<()> {
    let problem = if largest > LARGEST_SCALE {
        Some("overflow")
    } else if largest > 0.0 && largest < SMALLEST_SCALE {
        Some("underflow")
    } else {
        None
    };
    match problem {
        None => Ok(()),
        Some(what) => Err(Error::Table {
            path: path.to_path_buf(),
            message: format!(
                "the largest magnitude of any value is {largest:e}: variances of such numbers \
                 {what} double precision (values must lie within 1e-100..1e100 in magnitude); \
                 multiply both tables by one common factor, which leaves the ratio and the \
                 energies unchanged"
            ),
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn series(re: Vec<f64>, im: Vec<f64>) -> Series {
        Series {
            n_cfg: re.len(),
            n_t: 1,
            re,
            im,
        }
    }

    #[test]
    fn constant_needs_both_parts_constant() {
        assert_eq!(
            ValueFacts::of(&series(vec![0.0; 4], vec![0.0; 4])).constant,
            Some((0.0, 0.0))
        );
        assert_eq!(
            ValueFacts::of(&series(vec![2.0; 3], vec![1.0; 3])).constant,
            Some((2.0, 1.0))
        );
        // a purely imaginary channel with a zero real part carries signal
        assert_eq!(
            ValueFacts::of(&series(vec![0.0; 3], vec![1.0, 2.0, 3.0])).constant,
            None
        );
        assert_eq!(
            ValueFacts::of(&series(vec![1.0, 1.0, 1.5], vec![0.0; 3])).constant,
            None
        );
    }

    #[test]
    fn scale_limits() {
        let p = Path::new("t.csv");
        let ok = ValueFacts::of(&series(vec![1e-40, 3e-41], vec![0.0; 2])).largest;
        assert!(check_scale(ok, p).is_ok());
        let tiny = ValueFacts::of(&series(vec![1e-300, 2e-300], vec![0.0; 2])).largest;
        let e = check_scale(tiny, p).unwrap_err().to_string();
        assert!(e.contains("underflow") && e.contains("t.csv"), "{e}");
        let huge = ValueFacts::of(&series(vec![1e200, 2e200], vec![0.0; 2])).largest;
        let e = check_scale(huge, p).unwrap_err().to_string();
        assert!(e.contains("overflow"), "{e}");
        // all zero is the constant-channel check's business, not a scale problem
        let zero = ValueFacts::of(&series(vec![0.0; 2], vec![0.0; 2])).largest;
        assert!(check_scale(zero, p).is_ok());
    }

    /// The checks on shapes and facts ([`Shapes`], fed one channel at a time as a packed
    /// file's walk does) give the verdicts of the checks on the values.
    #[test]
    fn facts_give_the_verdicts_of_the_values() {
        use crate::io::hdf5::PackedVisitor;
        let key = |p: i32| TwoPointKey {
            momentum: [0, 0, p],
            smear: None,
            ops: None,
        };
        let varied = |n_t: usize, n_cfg: usize| {
            let re = (0..n_t * n_cfg).map(|i| 1.0 + i as f64 / 8.0).collect();
            let im = (0..n_t * n_cfg).map(|i| -(i as f64) / 16.0).collect();
            Series { n_cfg, n_t, re, im }
        };
        let mut constant = varied(3, 4);
        constant.re.iter_mut().for_each(|v| *v = 2.5);
        constant.im.iter_mut().for_each(|v| *v = 0.0);
        let mut huge = varied(3, 4);
        huge.im[5] = -1e150;
        let cases = [
            vec![varied(3, 4), varied(3, 4)],
            vec![varied(3, 4), constant.clone()],
            vec![huge, constant],
        ];
        let p = Path::new("data.hdf5");
        for (i, series) in cases.into_iter().enumerate() {
            let two = TwoPointData {
                configs: (0..4).collect(),
                channels: series
                    .iter()
                    .enumerate()
                    .map(|(k, s)| (key(k as i32), s.clone()))
                    .collect(),
            };
            let three = ThreePointData::default();
            let mut shapes = Shapes::new(None);
            shapes.configs(&two.configs).unwrap();
            for (k, s) in &two.channels {
                shapes.twopt(k.clone(), &mut s.clone()).unwrap();
            }
            assert!(shapes
                .two
                .channels
                .values()
                .all(|s| s.re.is_empty() && s.n_t == 3));
            let on_values = check_values(&two, p, &three, p, None).map_err(|e| e.to_string());
            let on_facts = check_values(&shapes.two, p, &three, p, Some(&shapes.facts))
                .map_err(|e| e.to_string());
            assert_eq!(on_values, on_facts, "case {i}");
            assert_eq!(on_values.is_ok(), i == 0, "case {i}: {on_values:?}");
        }
    }
}

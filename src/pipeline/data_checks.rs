//! Checks on the correlator values themselves, made once after reading: a channel that never
//! fluctuates (all zeros, or one constant) and values whose squares leave double precision.
//!
//! Why it exists: both cases used to pass the reader and surface later as a "zero variance"
//! fit error far from their cause, or as an empty result with exit code 0.

use crate::data::{Series, ThreePointData, TwoPointData};
use crate::ratio::ChannelKey;
use crate::{Error, Result};
use std::path::Path;

/// Values whose largest magnitude is below this underflow when squared and summed into a
/// variance; above [`LARGEST_SCALE`] they overflow (double precision ranges over about
/// 1e±308, so squares need magnitudes within about 1e±150; the margin covers the sums).
const SMALLEST_SCALE: f64 = 1e-100;
/// See [`SMALLEST_SCALE`].
const LARGEST_SCALE: f64 = 1e100;

/// Refuse a table whose values are all tiny or huge, and a channel that is the same on every
/// configuration at every time.
pub fn check_values(
    two: &TwoPointData,
    twopt_path: &Path,
    three: &ThreePointData,
    threept_path: &Path,
) -> Result<()> {
    let two_series = || two.channels.values();
    let three_series = || three.channels.values();
    check_scale(two_series(), twopt_path)?;
    check_scale(three_series(), threept_path)?;
    for (key, s) in &two.channels {
        if let Some(v) = constant_value(s) {
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
    for (key, s) in &three.channels {
        if let Some(v) = constant_value(s) {
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

/// The value of a series that is the same (real and imaginary part) on every configuration
/// at every time, or `None` if anything varies.
fn constant_value(s: &Series) -> Option<(f64, f64)> {
    let (re0, im0) = (*s.re.first()?, *s.im.first()?);
    let same = s.re.iter().all(|&x| x == re0) && s.im.iter().all(|&x| x == im0);
    same.then_some((re0, im0))
}

fn check_scale<'a>(series: impl Iterator<Item = &'a Series>, path: &Path) -> Result<()> {
    let largest = series
        .flat_map(|s| s.re.iter().chain(&s.im))
        .fold(0.0_f64, |m, v| m.max(v.abs()));
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
            constant_value(&series(vec![0.0; 4], vec![0.0; 4])),
            Some((0.0, 0.0))
        );
        assert_eq!(
            constant_value(&series(vec![2.0; 3], vec![1.0; 3])),
            Some((2.0, 1.0))
        );
        // a purely imaginary channel with a zero real part carries signal
        assert_eq!(
            constant_value(&series(vec![0.0; 3], vec![1.0, 2.0, 3.0])),
            None
        );
        assert_eq!(
            constant_value(&series(vec![1.0, 1.0, 1.5], vec![0.0; 3])),
            None
        );
    }

    #[test]
    fn scale_limits() {
        let p = Path::new("t.csv");
        let ok = [series(vec![1e-40, 3e-41], vec![0.0; 2])];
        assert!(check_scale(ok.iter(), p).is_ok());
        let tiny = [series(vec![1e-300, 2e-300], vec![0.0; 2])];
        let e = check_scale(tiny.iter(), p).unwrap_err().to_string();
        assert!(e.contains("underflow") && e.contains("t.csv"), "{e}");
        let huge = [series(vec![1e200, 2e200], vec![0.0; 2])];
        let e = check_scale(huge.iter(), p).unwrap_err().to_string();
        assert!(e.contains("overflow"), "{e}");
        // all zero is the constant-channel check's business, not a scale problem
        let zero = [series(vec![0.0; 2], vec![0.0; 2])];
        assert!(check_scale(zero.iter(), p).is_ok());
    }
}

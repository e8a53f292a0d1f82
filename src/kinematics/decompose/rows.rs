//! The rows of a shell's linear system: which parts (real, imaginary) of which channels carry
//! information, which form factors they constrain, and their data with the phase convention
//! applied.

use super::ChannelValue;
use crate::data::Current;
use crate::resample::Resampled;
use nalgebra::Complex;
use std::collections::BTreeMap;

type Outcome<T> = std::result::Result<T, String>;

/// One real equation: channel index and real (false) or imaginary (true) part.
pub(super) type Row = (usize, bool);

/// Structure from the central kinematics: which parts carry information (the rows), which
/// channels have a row, which of the `n_all` form factors are constrained at all (the
/// unknowns); refused with too few equations.
pub(super) fn structure(
    members: &[&ChannelValue],
    n_all: usize,
    coeffs: impl Fn(&ChannelValue) -> Outcome<Vec<Complex<f64>>>,
) -> Outcome<(Vec<Row>, Vec<usize>, Vec<usize>)> {
    let mut rows: Vec<Row> = Vec::new();
    let mut used: Vec<usize> = Vec::new();
    let mut active = vec![false; n_all];
    for (ci, c) in members.iter().enumerate() {
        let k = coeffs(c)?;
        let mut kept = false;
        for imag in [false, true] {
            let part = |z: &Complex<f64>| if imag { z.im } else { z.re };
            if k.iter().any(|z| part(z) != 0.0) {
                rows.push((ci, imag));
                kept = true;
                for (a, z) in active.iter_mut().zip(&k) {
                    *a |= part(z) != 0.0;
                }
            }
        }
        if kept {
            used.push(ci);
        }
    }
    let unknowns: Vec<usize> = (0..n_all).filter(|&j| active[j]).collect();
    if unknowns.is_empty() {
        return Err(format!(
            "all {} channels have vanishing coefficients",
            members.len()
        ));
    }
    if rows.len() < unknowns.len() {
        return Err(format!(
            "{} real equations for {} form factors: add channels (other projectors or momenta)",
            rows.len(),
            unknowns.len()
        ));
    }
    Ok((rows, used, unknowns))
}

/// Data with the phase convention applied, one resampled value per row.
pub(super) fn row_data(
    rows: &[Row],
    members: &[&ChannelValue],
    phases: &BTreeMap<Current, Complex<f64>>,
) -> Vec<Resampled> {
    rows.iter()
        .map(|&(ci, imag)| {
            let c = members[ci];
            let ph = phases
                .get(&c.current)
                .copied()
                .unwrap_or(Complex::new(1.0, 0.0));
            c.re.zip_map(&c.im, |re, im| {
                let z = ph * Complex::new(re, im);
                if imag {
                    z.im
                } else {
                    z.re
                }
            })
        })
        .collect()
}

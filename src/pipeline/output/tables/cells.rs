//! Cell helpers shared by the table builders: floats, and missing values as NaN.

use crate::report::Cell;

/// A float cell.
pub(super) fn float(x: f64) -> Cell {
    Cell::Float(x)
}

/// A float cell, NaN ("no value") when absent.
pub(super) fn opt(x: Option<f64>) -> Cell {
    Cell::Float(x.unwrap_or(f64::NAN))
}

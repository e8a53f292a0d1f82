//! The ratio-stage tables: the bare matrix element per channel and estimator, and the
//! cross-check of every pair of estimators.

use super::cells::float;
use crate::data::CHANNEL_COLUMNS;
use crate::pipeline::run::RunResults;
use crate::ratio::{ChannelKey, FitQuality};
use crate::report::{Cell, Table};
use crate::Result;

fn channel_cells(k: &ChannelKey) -> Vec<Cell> {
    vec![
        Cell::from(k.pf[0]),
        Cell::from(k.pf[1]),
        Cell::from(k.pf[2]),
        Cell::from(k.q[0]),
        Cell::from(k.q[1]),
        Cell::from(k.q[2]),
        Cell::from(k.current.name()),
        Cell::from(k.projector.name()),
    ]
}

/// `crosscheck`: every pair of excited-state estimates per channel and part, each part with
/// its own flag; a part equal on every resample (e.g. vanishing by symmetry) is left out.
pub(super) fn crosscheck(name: &str, results: &RunResults) -> Result<Table> {
    let mut cols: Vec<&str> = CHANNEL_COLUMNS.to_vec();
    cols.extend([
        "method",
        "reference",
        "part",
        "difference",
        "error",
        "sigma",
        "flag",
    ]);
    let mut t = Table::new(name, &cols);
    let Some(channels) = &results.channels else {
        return Ok(t);
    };
    for (k, c) in channels {
        for row in &c.crosscheck {
            for (part, d) in [("re", &row.re), ("im", &row.im)] {
                if !d.informative {
                    continue;
                }
                let mut cells = channel_cells(k);
                cells.extend([
                    Cell::from(row.method.to_string()),
                    Cell::from(row.reference.to_string()),
                    Cell::from(part),
                    float(d.value.central),
                    float(d.error),
                    float(d.sigma),
                    Cell::from(d.flag.name()),
                ]);
                t.push_row(cells)?;
            }
        }
    }
    Ok(t)
}

/// `matrix_elements`: the bare ratio estimate per channel and estimator.
pub(super) fn matrix_elements(name: &str, results: &RunResults) -> Result<Table> {
    let mut cols: Vec<&str> = CHANNEL_COLUMNS.to_vec();
    cols.extend([
        "method",
        "re",
        "re_error",
        "im",
        "im_error",
        "chi2_dof_re",
        "chi2_dof_im",
    ]);
    let mut t = Table::new(name, &cols);
    let Some(channels) = &results.channels else {
        return Ok(t);
    };
    let per_dof = |q: &FitQuality| {
        if q.dof > 0 {
            q.chi2 / q.dof as f64
        } else {
            f64::NAN
        }
    };
    for (k, c) in channels {
        for (method, fit) in c.estimates() {
            let mut cells = channel_cells(k);
            cells.extend([
                Cell::from(method.to_string()),
                float(fit.value.re.central),
                float(fit.value.re.error()),
                float(fit.value.im.central),
                float(fit.value.im.error()),
                float(per_dof(&fit.quality_re)),
                float(per_dof(&fit.quality_im)),
            ]);
            t.push_row(cells)?;
        }
    }
    Ok(t)
}

/// `negative_roots`: per channel, how often the product of two-point functions under the
/// ratio's square root was negative (`excited_states.negative_root` decides what was done
/// about it). `points` counts the channel's `(tsep, tau)` points kept, `negative_values` the
/// values (central and samples, over all points) with a negative product, `points_affected`
/// the points with at least one, `points_dropped` those dropped under `drop_point`.
pub(super) fn negative_roots(name: &str, results: &RunResults) -> Result<Table> {
    let mut cols: Vec<&str> = CHANNEL_COLUMNS.to_vec();
    cols.extend([
        "points",
        "negative_values",
        "points_affected",
        "points_dropped",
    ]);
    let mut t = Table::new(name, &cols);
    let Some(channels) = &results.channels else {
        return Ok(t);
    };
    for (k, c) in channels {
        let n = c.ratio.negative_root;
        let mut cells = channel_cells(k);
        cells.extend([
            Cell::from(c.ratio.points.len()),
            Cell::from(n.samples),
            Cell::from(n.points_affected),
            Cell::from(n.points_dropped),
        ]);
        t.push_row(cells)?;
    }
    Ok(t)
}

//! A chart of the report with its typed kind and file stem.

use crate::pipeline::spec::Plot;
use crate::report::Chart;

/// One chart of the report with its kind and file stem.
#[derive(Clone, Debug)]
pub struct Figure {
    /// The kind of plot.
    pub kind: Plot,
    /// File stem under `plots/`.
    pub name: String,
    /// The chart.
    pub chart: Chart,
}

impl Figure {
    pub(super) fn new(kind: Plot, name: impl Into<String>, chart: Chart) -> Figure {
        Figure {
            kind,
            name: name.into(),
            chart,
        }
    }
}

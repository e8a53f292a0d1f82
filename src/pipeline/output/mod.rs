//! Turning a run's results into the files of its run directory, through the generic writers
//! of [`crate::report`]: the tables by name ([`tables`]), the plots by kind ([`charts`]),
//! `report.html` ([`page`]), `manifest.json` ([`manifest`]), and the short terminal summary
//! ([`summary`]).

mod budget_table;
pub mod charts;
pub mod manifest;
pub mod page;
mod settings_text;
pub mod summary;
pub mod tables;

pub use summary::terminal_summary;
pub use tables::{summary_table, TableName, Tables};

use super::plan::Plan;
use super::run::RunResults;
use crate::report::render_svg;
use crate::{Error, Result};
use page::Rendered;
use std::path::Path;

/// Write the tables, plots and page into `dir`; a plot that cannot be drawn becomes a
/// warning. The manifest is written separately ([`write_manifest`]), last, so that it can
/// record the time of this step.
pub fn write_all(plan: &Plan, results: &mut RunResults, dir: &Path) -> Result<()> {
    let tables = Tables::build(results)?;
    tables.write(dir)?;
    let plot_dir = dir.join("plots");
    std::fs::create_dir_all(&plot_dir).map_err(|e| Error::io(&plot_dir, e))?;
    let mut rendered = Vec::new();
    for f in charts::figures(plan, results) {
        match render_svg(&f.chart) {
            Ok(svg) => {
                let path = plot_dir.join(format!("{}.svg", f.name));
                std::fs::write(&path, &svg).map_err(|e| Error::io(&path, e))?;
                rendered.push(Rendered {
                    kind: f.kind,
                    name: f.name,
                    caption: f.chart.title,
                    svg,
                });
            }
            Err(e) => results.warnings.push(format!("plot {}: {e}", f.name)),
        }
    }
    page::report_page(plan, results, &tables, &rendered).write(&dir.join("report.html"))
}

/// Write `manifest.json` into `dir`.
pub fn write_manifest(plan: &Plan, results: &RunResults, dir: &Path) -> Result<()> {
    manifest::manifest(plan, results)?.write(&dir.join("manifest.json"))
}

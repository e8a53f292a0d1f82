//! The output layer: everything a run leaves on disk, generic over what the stages computed.
//!
//! The pipeline turns stage results into these neutral types and calls the writers; this
//! module knows no physics.
//!
//! - [`table`]: [`Table`] of text/integer/float cells, written as CSV and JSON with floats
//!   that round-trip exactly, rendered as aligned text for the terminal summary; the long
//!   per-resample table ([`samples_table`]).
//! - [`plot`]: SVG charts (error bars, bands, lines, reference lines, log y axis, legend).
//! - [`html`]: the self-contained `report.html`; [`readable`](mod@readable): tables as the page shows
//!   them (`value(error)` columns, short numbers).
//! - [`manifest`]: `manifest.json` with version, input digests (SHA-256), settings, seed,
//!   stage times and warnings.
//! - [`rundir`]: the result directory, written into a temporary sibling and renamed into
//!   place only when the run succeeds.
//!
//! A run writes everything into a [`RunDir`] and commits it at the end:
//!
//! ```
//! use formfactory::report::{self, Block, Cell, Chart, Manifest, Report, RunDir, Section, Series, Table};
//! # fn main() -> formfactory::Result<()> {
//! # let tmp = tempfile::tempdir().expect("temporary directory");
//! # let out_dir = tmp.path().join("results");
//! let mut manifest = Manifest::start(serde_json::json!({ "fit": { "tmin": 3 } }), Some(1));
//! let run = RunDir::create(&out_dir, false)?;
//!
//! let mut energies = Table::new("energies", &["momentum", "E", "error"]);
//! energies.push_row(vec![Cell::from("000"), Cell::from(0.4512), Cell::from(0.0031)])?;
//! report::table::write_table_files(&energies, run.path())?;
//!
//! let chart = Chart {
//!     title: "Effective energy".into(),
//!     x_label: "t / a".into(),
//!     y_label: "a E_eff".into(),
//!     series: vec![Series::points("p = 000", 0, vec![1.0, 2.0], vec![0.6, 0.5], vec![0.01, 0.02])],
//!     ..Chart::default()
//! };
//! let svg = report::render_svg(&chart)?;
//! let page = Report {
//!     title: "Demo run".into(),
//!     sections: vec![Section::new("Spectrum")
//!         .with(Block::Table(energies))
//!         .with(Block::Svg { svg, caption: "Effective energy at rest".into() })],
//! };
//! page.write(&run.path().join("report.html"))?;
//! manifest.warnings.push("none serious".into());
//! manifest.write(&run.path().join("manifest.json"))?;
//! println!("{}", report::render_text(&Table::new("empty", &["x"]), 20));
//! let final_dir = run.commit()?;
//! assert!(final_dir.join("energies.csv").exists());
//! # Ok(())
//! # }
//! ```

pub mod html;
pub mod manifest;
pub mod plot;
pub mod readable;
pub mod rundir;
mod signals;
pub mod table;

pub use html::{Block, Report, Section};
pub use manifest::{InputFile, Manifest};
pub use plot::{render_svg, write_svg, Chart, Legend, ReferenceLine, Series, SeriesKind};
pub use readable::readable;
pub use rundir::{Marker, OutputRules, RunDir};
pub use table::{
    render_text, samples_table, value_error, value_errors, write_csv, write_json,
    write_table_files, Cell, Table,
};

//! The output layer: everything a run leaves on disk, generic over what the stages computed.
//!
//! The pipeline turns stage results into these neutral types and calls the writers; this
//! module knows no physics.
//!
//! - [`table`]: [`Table`] of text/integer/float cells, written as CSV and JSON with floats
//!   that round-trip exactly, rendered as aligned text for the terminal summary; the long
//!   per-resample table ([`samples_table`]).
//! - [`plot`]: SVG charts (error bars, bands, lines, reference lines, log y axis, legend).
//! - [`html`]: the self-contained `report.html`.
//! - [`manifest`]: `manifest.json` with version, input digests (SHA-256), settings, seed,
//!   stage times and warnings.
//! - [`rundir`]: the result directory, written into a temporary sibling and renamed into
//!   place only when the run succeeds.

pub mod html;
pub mod manifest;
pub mod plot;
pub mod rundir;
pub mod table;

pub use html::{Block, Report, Section};
pub use manifest::{InputFile, Manifest};
pub use plot::{render_svg, write_svg, Chart, Legend, ReferenceLine, Series, SeriesKind};
pub use rundir::RunDir;
pub use table::{render_text, samples_table, value_error, write_csv, write_json, Cell, Table};

//! The command layer: clap definitions, one function per command, errors to exit codes.
//!
//! Only argument handling and printing live here; everything testable is in the library.

mod progress;

use clap::{Args, CommandFactory, Parser, Subcommand};
use std::path::PathBuf;
use std::process::ExitCode;

/// Lattice QCD form factors from correlators, with resampled errors through every stage.
#[derive(Debug, Parser)]
#[command(name = "formfactory", version, about, long_about = None)]
pub struct Cli {
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run a YAML analysis pipeline end to end.
    #[command(
        after_help = "Example:\n  formfactory run pipelines/nucleon-vector.yaml --out runs/vector --jobs 2 --set resampling.bin_size=2"
    )]
    Run(RunArgs),
    /// Validate a pipeline and its data without computing anything.
    #[command(after_help = "Example:\n  formfactory check pipelines/nucleon-vector.yaml")]
    Check(CheckArgs),
    /// Generate a mock ensemble (two tables and truth.yaml) from a spec.
    #[command(
        after_help = "Example:\n  formfactory mock demo-data/nucleon.mock.yaml --out /tmp/nucleon"
    )]
    Mock(MockArgs),
    /// Summarise a data directory or a correlator table, with warnings.
    #[command(after_help = "Example:\n  formfactory inspect demo-data/nucleon")]
    Inspect(InspectArgs),
    /// Gather an ensemble once into one packed HDF5 file (needs the `hdf5` feature).
    #[command(
        after_help = "Examples:\n  formfactory pack pipelines/pion-vector-hdf5.yaml --out pion.h5\n  formfactory pack demo-data/pion --out pion.h5"
    )]
    Pack(PackArgs),
    /// Write a packed HDF5 file back out as CSV tables (needs the `hdf5` feature).
    #[command(after_help = "Example:\n  formfactory convert pion.h5 --out /tmp/pion-csv")]
    Convert(ConvertArgs),
    /// Campaigns: many ensembles and variants, run locally or on Slurm, combined.
    #[command(
        after_help = "Example:\n  formfactory campaign run pipelines/campaign-demo.yaml && formfactory campaign combine pipelines/campaign-demo.yaml --force"
    )]
    Campaign(crate::campaign::command::CampaignArgs),
    /// Print the JSON Schema of the pipeline file (or of the mock specification).
    #[command(
        after_help = "Examples:\n  formfactory schema > schemas/pipeline.schema.json\n  formfactory schema --mock > schemas/mock.schema.json\n  formfactory schema --markdown   # the key table of docs/pipeline.md"
    )]
    Schema(SchemaArgs),
    /// Print shell completions.
    #[command(
        after_help = "Example:\n  formfactory completions bash > ~/.local/share/bash-completion/completions/formfactory"
    )]
    Completions(CompletionsArgs),
}

/// Arguments of `run`.
#[derive(Debug, Args)]
pub struct RunArgs {
    /// The pipeline file.
    pub pipeline: PathBuf,
    /// Run directory (default: `output.dir` of the pipeline).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Override a setting by its dotted path, e.g. `--set ensemble.L=32`. Repeatable.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
    /// Worker threads (results do not depend on it).
    #[arg(long)]
    pub jobs: Option<usize>,
    /// No progress bars, no summary.
    #[arg(long)]
    pub quiet: bool,
    /// Replace an existing run directory.
    #[arg(long)]
    pub force: bool,
}

/// Arguments of `check`.
#[derive(Debug, Args)]
pub struct CheckArgs {
    /// The pipeline file.
    pub pipeline: PathBuf,
    /// Override a setting by its dotted path. Repeatable.
    #[arg(long = "set", value_name = "KEY=VALUE")]
    pub set: Vec<String>,
}

/// Arguments of `mock`.
#[derive(Debug, Args)]
pub struct MockArgs {
    /// The mock-ensemble spec (YAML).
    pub spec: PathBuf,
    /// Output directory for twopt.csv, threept.csv and truth.yaml.
    #[arg(long)]
    pub out: PathBuf,
    /// Replace an existing mock ensemble in the output directory.
    #[arg(long)]
    pub force: bool,
}

/// Arguments of `inspect`.
#[derive(Debug, Args)]
pub struct InspectArgs {
    /// A data directory (with twopt.csv / threept.csv), one table, a packed HDF5 file, or a
    /// pipeline file (its `data` section, e.g. an HDF5 mapping).
    pub path: PathBuf,
}

/// Arguments of `pack`.
#[derive(Debug, Args)]
pub struct PackArgs {
    /// A pipeline file (its `data` section: CSV tables or an HDF5 mapping) or a data
    /// directory with twopt.csv and threept.csv.
    pub input: PathBuf,
    /// The packed file to write.
    #[arg(long)]
    pub out: PathBuf,
    /// Replace an existing output file.
    #[arg(long)]
    pub force: bool,
    /// No progress bar.
    #[arg(long)]
    pub quiet: bool,
}

/// Arguments of `convert`.
#[derive(Debug, Args)]
pub struct ConvertArgs {
    /// A packed HDF5 file written by `pack`.
    pub input: PathBuf,
    /// Directory for twopt.csv and threept.csv (created if needed).
    #[arg(long)]
    pub out: PathBuf,
    /// Replace existing tables.
    #[arg(long)]
    pub force: bool,
}

/// Arguments of `completions`.
#[derive(Debug, Args)]
pub struct CompletionsArgs {
    /// The shell.
    pub shell: clap_complete::Shell,
}

/// Entry point used by `main`.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    match dispatch(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if is_broken_pipe(&e) => ExitCode::from(BROKEN_PIPE_STATUS),
        Err(e) => {
            eprintln!("error: {}", crate::error::printable(&error_text(&e)));
            ExitCode::FAILURE
        }
    }
}

/// The exit status after the reader of standard output went away: what a shell reports for
/// a process ended by SIGPIPE (128 + 13), without a message.
const BROKEN_PIPE_STATUS: u8 = 141;

fn is_broken_pipe(e: &crate::Error) -> bool {
    matches!(e, crate::Error::Io { source, .. } if source.kind() == std::io::ErrorKind::BrokenPipe)
}

/// The message of `e` followed by each cause that it does not already quote, so a cause is
/// printed once.
fn error_text(e: &crate::Error) -> String {
    let mut text = e.to_string();
    let mut source = std::error::Error::source(e);
    while let Some(s) = source {
        let cause = s.to_string();
        if !text.contains(&cause) {
            text.push_str(&format!("\n  caused by: {cause}"));
        }
        source = s.source();
    }
    text
}

/// Write `text` to standard output; a closed pipe or a full disk becomes an error instead of
/// a panic.
fn emit(text: &str) -> crate::Result<()> {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())
        .and_then(|()| out.flush())
        .map_err(|e| crate::Error::io("<standard output>", e))
}

fn dispatch(cli: Cli) -> crate::Result<()> {
    match cli.command {
        Command::Run(a) => run(a),
        Command::Check(a) => check(a),
        Command::Mock(a) => mock(a),
        Command::Inspect(a) => inspect(a),
        Command::Pack(a) => crate::pack::pack(&a.input, &a.out, a.force, a.quiet),
        Command::Convert(a) => crate::pack::convert(&a.input, &a.out, a.force),
        Command::Campaign(a) => crate::campaign::command::dispatch(a),
        Command::Schema(a) => schema(a),
        Command::Completions(a) => {
            let mut buf = Vec::new();
            clap_complete::generate(a.shell, &mut Cli::command(), "formfactory", &mut buf);
            emit(&String::from_utf8_lossy(&buf))
        }
    }
}

fn run(a: RunArgs) -> crate::Result<()> {
    let mut plan = crate::pipeline::load(&a.pipeline, &a.set)?;
    if let Some(out) = a.out {
        plan = plan.with_out_dir(out);
    }
    if a.jobs == Some(0) {
        return Err(crate::Error::config(
            "--jobs 0: expected at least one worker thread",
        ));
    }
    plan.force = a.force;
    plan.jobs = a.jobs;
    let progress = progress::Progress::new(a.quiet);
    let results = crate::pipeline::run(&plan, &progress)?;
    if !a.quiet {
        emit(&crate::pipeline::output::terminal_summary(&results))?;
    }
    Ok(())
}

fn check(a: CheckArgs) -> crate::Result<()> {
    let summary = crate::pipeline::check(&a.pipeline, &a.set)?;
    emit(&format!("{}\n", summary.trim_end()))
}

fn mock(a: MockArgs) -> crate::Result<()> {
    let summary = crate::mock::generate_from_file(&a.spec, &a.out, a.force)?;
    emit(&format!("{summary}\n"))
}

fn inspect(a: InspectArgs) -> crate::Result<()> {
    let report = crate::pack::inspect(&a.path)?;
    emit(&report)
}

fn schema(a: SchemaArgs) -> crate::Result<()> {
    let text = match (a.mock, a.markdown) {
        (false, false) => crate::pipeline::schema_json(),
        (true, false) => crate::mock::schema_json(),
        (false, true) => crate::pipeline::reference::markdown(&crate::pipeline::schema_value()),
        (true, true) => crate::pipeline::reference::markdown(&crate::mock::schema_value()),
    };
    emit(&text)
}

/// Arguments of `formfactory schema`.
#[derive(clap::Args, Debug)]
pub struct SchemaArgs {
    /// The mock specification's schema instead of the pipeline file's.
    #[arg(long)]
    mock: bool,
    /// The key table of the reference document (docs/pipeline.md, docs/mock.md) instead of
    /// the JSON Schema.
    #[arg(long)]
    markdown: bool,
}

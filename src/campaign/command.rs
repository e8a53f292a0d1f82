//! The `formfactory campaign …` subcommands: argument types and one function per command.
//! Only argument handling and printing live here.

use super::local::{run_all, run_task, status};
use super::{expand, load, output, slurm};
use crate::report::table::{render_text, Cell, Table};
use crate::{Error, Result};
use clap::{Args, Subcommand};
use std::path::PathBuf;

/// `formfactory campaign`: arguments.
#[derive(Debug, Args)]
pub struct CampaignArgs {
    /// The campaign command.
    #[command(subcommand)]
    pub command: CampaignCommand,
}

/// The campaign commands.
#[derive(Debug, Subcommand)]
pub enum CampaignCommand {
    /// Validate a campaign file and every run's settings, computing nothing.
    #[command(after_help = "Example:\n  formfactory campaign check pipelines/campaign-demo.yaml")]
    Check(Target),
    /// Run every (ensemble, variant) that is not up to date, several at once.
    #[command(
        after_help = "Example:\n  formfactory campaign run pipelines/campaign-demo.yaml --parallel 2"
    )]
    Run(RunArgs),
    /// List the runs: done, stale, failed or pending.
    #[command(after_help = "Example:\n  formfactory campaign status pipelines/campaign-demo.yaml")]
    Status(Target),
    /// Write the Slurm job-array script (and submit it with --submit).
    #[command(
        after_help = "Example:\n  formfactory campaign slurm pipelines/campaign-demo.yaml --failed --submit"
    )]
    Slurm(SlurmArgs),
    /// Run one task by its array index (what each Slurm array task runs).
    #[command(
        after_help = "Example:\n  formfactory campaign task pipelines/campaign-demo.yaml --index 3"
    )]
    Task(TaskArgs),
    /// Fit the runs' results against a² and m_π² and write the combination.
    #[command(
        after_help = "Example:\n  formfactory campaign combine pipelines/campaign-demo.yaml --force"
    )]
    Combine(CombineArgs),
    /// Print the JSON Schema of the campaign file.
    #[command(
        after_help = "Example:\n  formfactory campaign schema > schemas/campaign.schema.json"
    )]
    Schema,
}

/// A campaign file and where its results go.
#[derive(Debug, Args)]
pub struct Target {
    /// The campaign file.
    pub campaign: PathBuf,
    /// Campaign directory instead of the file's `output`.
    #[arg(long)]
    pub output: Option<PathBuf>,
}

/// Arguments of `campaign run`.
#[derive(Debug, Args)]
pub struct RunArgs {
    #[command(flatten)]
    target: Target,
    /// Runs at once (default: the file's `parallel`).
    #[arg(long)]
    parallel: Option<usize>,
    /// Run every task, also those that are up to date.
    #[arg(long)]
    force: bool,
}

/// Arguments of `campaign slurm`.
#[derive(Debug, Args)]
pub struct SlurmArgs {
    #[command(flatten)]
    target: Target,
    /// Only the tasks whose last run failed.
    #[arg(long, conflicts_with = "unfinished")]
    failed: bool,
    /// Only the tasks that are not done (failed, stale or never finished).
    #[arg(long)]
    unfinished: bool,
    /// Submit the script with `sbatch` and print the job id.
    #[arg(long)]
    submit: bool,
}

/// Arguments of `campaign task`.
#[derive(Debug, Args)]
pub struct TaskArgs {
    #[command(flatten)]
    target: Target,
    /// The task's array index.
    #[arg(long)]
    index: usize,
    /// Worker threads of the run.
    #[arg(long, default_value_t = 1)]
    threads: usize,
}

/// Arguments of `campaign combine`.
#[derive(Debug, Args)]
pub struct CombineArgs {
    #[command(flatten)]
    target: Target,
    /// Replace an existing combination.
    #[arg(long)]
    force: bool,
}

fn open(t: &Target) -> Result<super::Campaign> {
    let mut c = load(&t.campaign)?;
    if let Some(o) = &t.output {
        c.output = o.clone();
    }
    Ok(c)
}

/// Run a campaign command.
pub fn dispatch(a: CampaignArgs) -> Result<()> {
    match a.command {
        CampaignCommand::Check(t) => print!("{}", super::check(&open(&t)?)?),
        CampaignCommand::Run(a) => run(a)?,
        CampaignCommand::Status(t) => print!("{}", status_text(&open(&t)?)?),
        CampaignCommand::Slurm(a) => slurm_cmd(a)?,
        CampaignCommand::Task(a) => {
            let c = open(&a.target)?;
            let tasks = expand::tasks(&c);
            let task = tasks.get(a.index).ok_or_else(|| {
                Error::config(format!(
                    "--index {}: the campaign has tasks 0..{}",
                    a.index,
                    tasks.len().saturating_sub(1)
                ))
            })?;
            println!("task {}: {}", task.index, task.label());
            run_task(&c, task, a.threads)?;
            println!("done: {}", task.run_dir.display());
        }
        CampaignCommand::Combine(a) => {
            let c = open(&a.target)?;
            let comb = super::combine::combine(&c)?;
            for w in &comb.warnings {
                eprintln!("warning: {w}");
            }
            let dir = output::write(&c, &comb, &c.output.join("combined"), a.force)?;
            print!("{}", render_text(&output::physical_table(&comb)?, 50));
            println!("report: {}", dir.join("report.html").display());
        }
        CampaignCommand::Schema => print!("{}", super::schema_json()),
    }
    Ok(())
}

fn run(a: RunArgs) -> Result<()> {
    let c = open(&a.target)?;
    let parallel = a.parallel.unwrap_or(c.spec.parallel);
    if parallel == 0 {
        return Err(Error::config(
            "--parallel 0: expected at least one run at a time",
        ));
    }
    let tasks = expand::tasks(&c);
    let s = run_all(&c, &tasks, parallel, a.force)?;
    println!(
        "{} runs: {} computed, {} up to date, {} failed",
        tasks.len(),
        s.ran.len(),
        s.skipped.len(),
        s.failed.len()
    );
    for (t, e) in &s.failed {
        println!("failed: {t}: {e}");
    }
    if s.failed.is_empty() {
        Ok(())
    } else {
        Err(Error::analysis(
            "campaign",
            format!("{} of {} runs failed", s.failed.len(), tasks.len()),
        ))
    }
}

/// The status table as text.
pub fn status_text(c: &super::Campaign) -> Result<String> {
    let mut t = Table::new(
        "status",
        &["index", "ensemble", "variant", "state", "detail"],
    );
    let mut counts = std::collections::BTreeMap::new();
    for task in expand::tasks(c) {
        let st = status(c, &task)?;
        *counts.entry(st.state.name()).or_insert(0usize) += 1;
        t.push_row(vec![
            Cell::from(task.index),
            Cell::from(task.ensemble_name.as_str()),
            Cell::from(task.variant.as_str()),
            Cell::from(st.state.name()),
            Cell::from(st.detail.lines().next().unwrap_or("")),
        ])?;
    }
    let mut out = render_text(&t, usize::MAX);
    let summary: Vec<String> = counts.iter().map(|(k, v)| format!("{v} {k}")).collect();
    out.push_str(&summary.join(", "));
    out.push('\n');
    Ok(out)
}

fn slurm_cmd(a: SlurmArgs) -> Result<()> {
    let c = open(&a.target)?;
    let tasks = expand::tasks(&c);
    let mut chosen = Vec::new();
    for t in &tasks {
        let st = status(&c, t)?.state;
        let keep = if a.failed {
            st == super::local::State::Failed
        } else if a.unfinished {
            st != super::local::State::Done
        } else {
            true
        };
        if keep {
            chosen.push(t);
        }
    }
    let kind = if a.failed {
        "failed"
    } else if a.unfinished {
        "unfinished"
    } else {
        "all"
    };
    let exe = match &c.spec.slurm.executable {
        Some(p) => p.clone(),
        None => std::env::current_exe().map_err(|e| Error::io("formfactory executable", e))?,
    };
    let script = slurm::write_script(&c, &chosen, kind, &exe)?;
    println!(
        "script: {} ({} array tasks)",
        script.display(),
        chosen.len()
    );
    if a.submit {
        let id = slurm::submit(&script)?;
        println!("submitted job {id}");
    }
    Ok(())
}

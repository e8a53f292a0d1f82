//! `formfactory pack`, `convert` and `inspect`: moving an ensemble between its sources (CSV
//! tables, HDF5 files described by a pipeline's mapping) and the packed HDF5 file.
//!
//! It exists between the command layer and [`crate::pipeline`] because packing reads a
//! pipeline's `data` section (the mapping lives there) but computes nothing.

use crate::io::{self, hdf5, ReadOptions};
use crate::{Error, Result};
use std::path::{Path, PathBuf};

/// Read what `input` names: a data directory with `twopt.csv` and `threept.csv`, or a
/// pipeline file's `data` section. `progress` sees (files done, files in all).
fn read_input(input: &Path, progress: &dyn Fn(usize, usize)) -> Result<io::Dataset> {
    if input.is_dir() {
        let (two, three) = (input.join("twopt.csv"), input.join("threept.csv"));
        return io::read_dataset(&two, Some(&three), &ReadOptions::default());
    }
    let plan = crate::pipeline::load(input, &[])?;
    let opts = ReadOptions {
        keep_common_configs: plan.spec.data.keep_common_configs,
    };
    crate::pipeline::read_source(&plan, &opts, progress)
}

/// Gather `input` into one packed file `out` (refused if it exists, unless `force`).
pub fn pack(input: &Path, out: &Path, force: bool, quiet: bool) -> Result<()> {
    if !hdf5::ENABLED {
        return Err(hdf5::not_enabled("`formfactory pack`"));
    }
    if out.exists() && !force {
        return Err(Error::config(format!(
            "{} exists; pass --force to replace it",
            out.display()
        )));
    }
    let bar = progress_bar(quiet);
    let start = std::time::Instant::now();
    let ds = read_input(input, &|done, all| {
        bar.set_length(all as u64);
        bar.set_position(done as u64);
    })?;
    bar.finish_and_clear();
    let read = start.elapsed();
    let three = ds.threept.unwrap_or_default();
    hdf5::write_packed(out, &ds.twopt, &three)?;
    if !quiet {
        for n in &ds.notes {
            println!("{n}");
        }
        println!(
            "packed {} two-point and {} three-point channels on {} configurations into {} (read {:.2} s, total {:.2} s)",
            ds.twopt.channels.len(),
            three.channels.len(),
            ds.twopt.configs.len(),
            out.display(),
            read.as_secs_f64(),
            start.elapsed().as_secs_f64()
        );
    }
    Ok(())
}

fn progress_bar(quiet: bool) -> indicatif::ProgressBar {
    use std::io::IsTerminal;
    if quiet || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(0);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("reading {bar:40} {pos}/{len} files ({eta})")
    {
        bar.set_style(style);
    }
    bar
}

/// Write the packed file `input` as `twopt.csv` and `threept.csv` in `out` (each written to
/// a temporary file and renamed into place; existing tables are replaced only with `force`).
pub fn convert(input: &Path, out: &Path, force: bool) -> Result<()> {
    let (two, three) = hdf5::read_packed(input)?;
    std::fs::create_dir_all(out).map_err(|e| Error::io(out, e))?;
    let targets: [PathBuf; 2] = [out.join("twopt.csv"), out.join("threept.csv")];
    if let Some(t) = targets.iter().find(|t| t.exists()).filter(|_| !force) {
        return Err(Error::config(format!(
            "{} exists; pass --force to replace it",
            t.display()
        )));
    }
    for (i, target) in targets.iter().enumerate() {
        let tmp = tempfile::Builder::new()
            .prefix(".formfactory-convert")
            .tempfile_in(out)
            .map_err(|e| Error::io(out, e))?;
        {
            let w = std::io::BufWriter::new(tmp.as_file());
            if i == 0 {
                io::write_twopt(&two, w)?;
            } else {
                io::write_threept(&three, w)?;
            }
        }
        hdf5::persist(tmp, target)?;
    }
    println!(
        "wrote {} and {}",
        targets[0].display(),
        targets[1].display()
    );
    Ok(())
}

/// `formfactory inspect`: a pipeline file is inspected through its `data` section (so HDF5
/// mappings can be checked), anything else as read by [`io::inspect::read`]; the
/// autocorrelation check comes from `resample`, the text from `io::inspect`.
pub fn inspect(path: &Path) -> Result<String> {
    let is_yaml = path.extension().is_some_and(|e| e == "yaml" || e == "yml");
    let data = if is_yaml {
        inspect_pipeline(path)?
    } else {
        io::inspect::read(path)?
    };
    let autocorr = crate::resample::autocorr_check::check_points(data.points());
    Ok(io::inspect::render(&data, &autocorr))
}

/// What `inspect` shows of a pipeline's data: CSV tables read one channel at a time
/// ([`io::inspect::read_tables`]) unless one comes from standard input or only the
/// configurations common to both are kept; an HDF5 source, and those, read whole.
fn inspect_pipeline(path: &Path) -> Result<io::inspect::Inspected> {
    let plan = crate::pipeline::load(path, &[])?;
    let opts = ReadOptions {
        keep_common_configs: plan.spec.data.keep_common_configs,
    };
    let stdin = Path::new("-");
    if plan.hdf5.is_none() && plan.twopt != stdin && plan.threept != stdin {
        if let Some(data) = io::inspect::read_tables(path, &plan.twopt, &plan.threept, &opts)? {
            return Ok(data);
        }
    }
    let ds = crate::pipeline::read_source(&plan, &opts, &|_, _| {})?;
    let three = ds.threept.unwrap_or_default();
    Ok(io::inspect::from_data(path, ds.twopt, three))
}

//! The first stage of a run: read both tables, apply the data rules, study the
//! autocorrelation of a few representative points, bin, and build the one resample plan
//! every later stage uses.

use crate::data::{ThreePointData, TwoPointData};
use crate::io::inspect::point_name;
use crate::pipeline::observer::Recorder;
use crate::pipeline::plan::Plan;
use crate::pipeline::results::{AutocorrPoint, DataSummary};
use crate::pipeline::spec::ResamplingMethod;
use crate::resample::autocorr::AutocorrResult;
use crate::resample::autocorr_check;
use crate::resample::binning::bin_tables;
use crate::resample::inflation;
use crate::resample::ResamplePlan;
use crate::Result;

/// The binned data and the one resample plan every later stage uses.
pub(in crate::pipeline) struct Prepared {
    pub(in crate::pipeline) two: TwoPointData,
    pub(in crate::pipeline) three: ThreePointData,
    pub(in crate::pipeline) plan: ResamplePlan,
}

/// Read, check, bin and resample; what was dropped on the way becomes a warning.
pub(in crate::pipeline) fn read_and_resample(
    plan: &Plan,
    rec: &mut Recorder,
) -> Result<(Prepared, DataSummary)> {
    let spec = &plan.spec;
    let digests = BackgroundDigests::start(plan);
    let read = crate::pipeline::read_data(plan)?;
    let (two, three, notes, mut input_digests) = (read.two, read.three, read.notes, read.digests);
    crate::pipeline::check_data_rules(plan, &two, &three)?;
    let n_configs = two.configs.len();
    if !read.dropped_configs.is_empty() {
        rec.warn(format!(
            "data: kept the {n_configs} configurations common to both tables and dropped {}: {}",
            read.dropped_configs.len(),
            config_list(&read.dropped_configs)
        ));
    }
    let b = spec.resampling.bin_size;
    let autocorrelation = autocorrelation(&two, &three);
    if let Some(w) = bin_size_warning(&autocorrelation, b) {
        rec.warn(w);
    }
    // Each unbinned table is dropped as soon as its binned copy exists (lower peak memory);
    // with bin size 1 the tables are kept as they are (no copy).
    let (mut two, mut three, report) = bin_tables(two, three, b)?;
    let binned_autocorrelation = inflation::measure(&two, &three);
    let decision = inflation::decide(
        &binned_autocorrelation,
        spec.resampling.autocorrelation_inflation,
        b,
    );
    if let Some(f) = decision.factor {
        inflation::inflate_all(&mut two, &mut three, f);
    }
    if let Some(m) = decision.message {
        rec.warn(m);
    }
    if !report.dropped_configs.is_empty() {
        rec.warn(format!(
            "binning by {b} dropped the last {} configuration(s): {}",
            report.dropped_configs.len(),
            config_list(&report.dropped_configs)
        ));
    }
    input_digests.extend(digests.finish());
    let n_bins = report.n_bins;
    let rplan = match spec.resampling.method {
        ResamplingMethod::Jackknife => ResamplePlan::jackknife(n_bins),
        ResamplingMethod::Bootstrap => {
            ResamplePlan::bootstrap(n_bins, spec.resampling.samples, spec.resampling.seed)
        }
    };
    let summary = DataSummary {
        n_configs,
        bin_size: b,
        n_bins,
        n_samples: rplan.n_samples(),
        n_twopt_channels: two.channels.len(),
        n_threept_channels: three.channels.len(),
        t_extent: two.channels.values().map(|s| s.n_t).max().unwrap_or(0),
        dropped_not_in_both: read.dropped_configs,
        dropped_by_binning: report.dropped_configs,
        notes,
        autocorrelation,
        binned_autocorrelation,
        inflation: decision.factor,
        input_digests,
    };
    let prepared = Prepared {
        two,
        three,
        plan: rplan,
    };
    Ok((prepared, summary))
}

/// The digests (for the run manifest) of an HDF5 source's files, which the library reads
/// and nothing hashes on the way: taken on a thread of their own while the stage reads and
/// resamples, when the run has more than one worker thread (with one, the manifest hashes
/// them when it is written, as it does for any input without a digest). A file that cannot
/// be hashed here is left to the manifest, which reports the error. Dropped without
/// [`BackgroundDigests::finish`] (the stage failed), the thread stops at its next block.
struct BackgroundDigests {
    thread: Option<std::thread::JoinHandle<Vec<crate::io::FileDigest>>>,
    stop: std::sync::Arc<std::sync::atomic::AtomicBool>,
}

impl BackgroundDigests {
    fn start(plan: &Plan) -> Self {
        let stop = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
        let none = |stop| BackgroundDigests { thread: None, stop };
        if plan.hdf5.is_none() || rayon::current_num_threads() < 2 {
            return none(stop);
        }
        let files = plan.input_files();
        if files.is_empty() {
            // per-configuration files: too many to hash (the manifest records the template)
            return none(stop);
        }
        let stopped = std::sync::Arc::clone(&stop);
        let thread = std::thread::Builder::new()
            .name("digest".into())
            .spawn(move || {
                let stop = || stopped.load(std::sync::atomic::Ordering::Relaxed);
                files
                    .into_iter()
                    .filter_map(|path| {
                        let (sha256, bytes) =
                            crate::report::manifest::sha256_file_unless(&path, stop).ok()??;
                        Some(crate::io::FileDigest {
                            path,
                            bytes,
                            sha256,
                        })
                    })
                    .collect()
            });
        // A thread that cannot start leaves the hashing to the manifest.
        BackgroundDigests {
            thread: thread.ok(),
            stop,
        }
    }

    /// The digests taken (a failed thread gives none; the manifest hashes those files).
    fn finish(mut self) -> Vec<crate::io::FileDigest> {
        self.thread
            .take()
            .and_then(|t| t.join().ok())
            .unwrap_or_default()
    }
}

impl Drop for BackgroundDigests {
    fn drop(&mut self) {
        self.stop.store(true, std::sync::atomic::Ordering::Relaxed);
    }
}

/// The autocorrelation study of the representative points, on the unbinned data.
fn autocorrelation(two: &TwoPointData, three: &ThreePointData) -> Vec<AutocorrPoint> {
    autocorr_check::study(Some(two), Some(three))
        .into_iter()
        .map(|s| AutocorrPoint {
            point: point_name(&s.autocorr.point),
            n: two.configs.len(),
            result: s.autocorr.result.map_err(|e| e.to_string()),
            binning: s.binning,
        })
        .collect()
}

/// One warning when the bins are shorter than about twice the integrated autocorrelation
/// time at any representative point (beyond the estimate's error), naming the worst.
fn bin_size_warning(points: &[AutocorrPoint], bin_size: usize) -> Option<String> {
    let flagged: Vec<(&str, &AutocorrResult)> = points
        .iter()
        .filter_map(|p| p.result.as_ref().ok().map(|r| (p.point.as_str(), r)))
        .filter(|(_, r)| autocorr_check::bins_too_small(bin_size, r.tau_int, r.tau_int_error))
        .collect();
    let (worst, r) = flagged
        .iter()
        .max_by(|a, b| a.1.tau_int.total_cmp(&b.1.tau_int))?;
    let suggested = (2.0 * r.tau_int).ceil().max(1.0);
    Some(format!(
        "autocorrelation: bins of {bin_size} configuration(s) are shorter than 2 tau_int at \
         {} of {} representative points (largest: tau_int = {:.2} +- {:.2} at {worst}); errors \
         may be too small by up to a factor {:.2}; consider resampling.bin_size: {suggested} \
         (see autocorrelation.csv and binning_study.csv)",
        flagged.len(),
        points.len(),
        r.tau_int,
        r.tau_int_error,
        (2.0 * r.tau_int / bin_size as f64).sqrt(),
    ))
}

/// Configuration numbers for a message: all of them up to 20, else the first 20 and a count
/// (the manifest lists them all).
fn config_list(configs: &[i64]) -> String {
    const SHOWN: usize = 20;
    let head: Vec<String> = configs.iter().take(SHOWN).map(|c| c.to_string()).collect();
    if configs.len() > SHOWN {
        format!(
            "{}, … ({} more; all are listed in manifest.json)",
            head.join(", "),
            configs.len() - SHOWN
        )
    } else {
        head.join(", ")
    }
}

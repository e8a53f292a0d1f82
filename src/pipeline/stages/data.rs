//! The first stage of a run: read both tables, apply the data rules, bin, and build the one
//! resample plan every later stage uses.

use crate::data::{ThreePointData, TwoPointData};
use crate::pipeline::observer::Recorder;
use crate::pipeline::plan::Plan;
use crate::pipeline::results::DataSummary;
use crate::pipeline::spec::ResamplingMethod;
use crate::resample::binning::{bin_threept, bin_twopt};
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
    let read = crate::pipeline::read_data(plan)?;
    let (two, three, notes, input_digests) = (read.two, read.three, read.notes, read.digests);
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
    // Each unbinned table is dropped as soon as its binned copy exists (lower peak memory).
    let (two, report) = bin_twopt(&{ two }, b)?;
    let (three, _) = bin_threept(&{ three }, b)?;
    if !report.dropped_configs.is_empty() {
        rec.warn(format!(
            "binning by {b} dropped the last {} configuration(s): {}",
            report.dropped_configs.len(),
            config_list(&report.dropped_configs)
        ));
    }
    let n_bins = report.n_bins;
    let rplan = match spec.resampling.method {
        ResamplingMethod::Jackknife => ResamplePlan::jackknife(n_bins),
        ResamplingMethod::Bootstrap => {
            ResamplePlan::bootstrap(n_bins, spec.resampling.samples, spec.resampling.seed)
        }
    };
    let summary = DataSummary {
        n_configs,
        n_bins,
        n_samples: rplan.n_samples(),
        n_twopt_channels: two.channels.len(),
        n_threept_channels: three.channels.len(),
        t_extent: two.channels.values().map(|s| s.n_t).max().unwrap_or(0),
        dropped_not_in_both: read.dropped_configs,
        dropped_by_binning: report.dropped_configs,
        notes,
        input_digests,
    };
    let prepared = Prepared {
        two,
        three,
        plan: rplan,
    };
    Ok((prepared, summary))
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

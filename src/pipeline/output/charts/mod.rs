//! The plots of a run, each a [`Figure`] of a typed [`Plot`] kind: the pipeline's
//! `output.plots` list selects kinds, the report page places figures by kind, and the file
//! name under `plots/` follows from the kind and names the channel, shell or quantity
//! (`effective-mass.svg`, `ratio-V4-unpol-pf0.0.0-q0.0.1.svg`, `formfactor-GE.svg`, ...).
//! Colours, markers and typeset names come from `style`, the same in every run.
//!
//! To add a plot: add a variant to [`Plot`] (in the pipeline settings, so it can be listed
//! under `output.plots`; regenerate the schema), write a function from [`RunResults`] to
//! charts in the submodule of the stage it shows, call it from [`figures`], and place the
//! kind in a section of the page (`page.rs`).

mod autocorrelation;
mod figure;
mod final_results;
mod formfactors;
mod gevp;
mod ratio;
mod spectrum;
mod style;

pub use figure::Figure;
pub(super) use style::{quantity as typeset_quantity, unit as typeset_unit};

use crate::pipeline::plan::Plan;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;

/// The figures the pipeline asks for, in the order of [`Plot`].
pub fn figures(plan: &Plan, results: &RunResults) -> Vec<Figure> {
    let mut kinds = plan.spec.output.plots.clone();
    kinds.sort();
    kinds.dedup();
    let shown = ratio::showcase_channels(results);
    let mut out = Vec::new();
    for kind in kinds {
        match kind {
            Plot::EffectiveMass => out.extend(spectrum::effective_mass(results)),
            Plot::Dispersion => out.extend(spectrum::dispersion(results)),
            Plot::Ratio => out.extend(ratio::ratio_charts(
                &shown,
                plan.spec.excited_states.tau_cut,
            )),
            Plot::Summation => out.extend(ratio::summation_charts(&shown)),
            Plot::FormFactors => out.extend(formfactors::charts(plan, results)),
            Plot::FinalVariants => out.extend(final_results::charts(results)),
            Plot::GevpEnergies => out.extend(gevp::effective_energies(results)),
            Plot::GevpVectors => out.extend(gevp::vectors(results)),
            Plot::Binning => out.extend(autocorrelation::binning(results)),
        }
    }
    out
}

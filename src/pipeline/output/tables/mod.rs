//! The tables of a run, each known by a [`TableName`]: the name fixes the file stem
//! (`formfactors.csv` / `.json`), and the report page and the tests ask for a table by its
//! name, never by its position in a list.
//!
//! To add a table: add a variant to [`TableName`] (its file stem in [`TableName::stem`]),
//! write its builder (a function from [`RunResults`] to a [`Table`]) in the submodule of the
//! stage it shows, and call it from [`TableName::build`]. It is then written as CSV and JSON
//! and available to the page through [`Tables::get`].

mod autocorrelation;
mod cells;
mod final_results;
mod formfactor_check;
mod formfactors;
mod gevp;
mod q2_fits;
mod ratio;
mod spectrum;

use crate::pipeline::run::RunResults;
use crate::report::{table::write_table_files, Table};
use crate::Result;
use std::collections::BTreeMap;
use std::path::Path;

pub use final_results::quoted;
pub use formfactors::summary_table;

/// A table of the run directory.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum TableName {
    /// The final value of every quantity with its error budget.
    Final,
    /// Every analysis variant of every final value with its weight.
    FinalVariants,
    /// One row per estimator, form factor and Q² shell.
    FormFactors,
    /// Quantities derived from the Q² fits (charges, radii).
    Derived,
    /// Every parameter of every Q² fit with the fit's quality.
    Q2Fits,
    /// Energies per momentum and state with their fit quality.
    Spectrum,
    /// Every fit of the spectrum model average with its weight and exclusion reason.
    SpectrumFits,
    /// Effective mass per momentum and time slice.
    EffectiveMass,
    /// Fitted energies against the dispersion relations.
    Dispersion,
    /// Every comparison of two estimators per channel and part.
    CrossCheck,
    /// Every comparison of two estimators per form factor and Q² shell, with the plateau
    /// verdicts.
    FormFactorCrossCheck,
    /// The bare matrix element per channel and estimator.
    MatrixElements,
    /// Negative products under the ratio's square root, per channel.
    NegativeRoots,
    /// Per-resample values of every form factor.
    FormFactorSamples,
    /// Per-resample values of every derived quantity.
    DerivedSamples,
    /// GEVP principal correlators and effective energies per state.
    GevpCorrelators,
    /// GEVP eigenvector components versus t.
    GevpVectors,
    /// Energies fitted to the principal correlators.
    GevpEnergies,
    /// Optimised against single-operator results.
    OperatorComparison,
    /// Integrated autocorrelation time of representative data points.
    Autocorrelation,
    /// Error of the mean of representative data points against the bin size.
    BinningStudy,
}

impl TableName {
    /// Every table, in the order they are written.
    pub const ALL: [TableName; 21] = [
        TableName::Final,
        TableName::FinalVariants,
        TableName::FormFactorCrossCheck,
        TableName::FormFactors,
        TableName::Derived,
        TableName::Q2Fits,
        TableName::Spectrum,
        TableName::SpectrumFits,
        TableName::EffectiveMass,
        TableName::Dispersion,
        TableName::CrossCheck,
        TableName::MatrixElements,
        TableName::NegativeRoots,
        TableName::FormFactorSamples,
        TableName::DerivedSamples,
        TableName::GevpCorrelators,
        TableName::GevpVectors,
        TableName::GevpEnergies,
        TableName::OperatorComparison,
        TableName::Autocorrelation,
        TableName::BinningStudy,
    ];

    /// The file stem (`formfactors` → `formfactors.csv`, `formfactors.json`).
    pub fn stem(self) -> &'static str {
        match self {
            TableName::Final => "final",
            TableName::FinalVariants => "final_variants",
            TableName::FormFactors => "formfactors",
            TableName::Derived => "derived",
            TableName::Q2Fits => "q2_fits",
            TableName::Spectrum => "spectrum",
            TableName::SpectrumFits => "spectrum_fits",
            TableName::EffectiveMass => "effective_mass",
            TableName::Dispersion => "dispersion",
            TableName::CrossCheck => "crosscheck",
            TableName::FormFactorCrossCheck => "formfactor_crosscheck",
            TableName::MatrixElements => "matrix_elements",
            TableName::NegativeRoots => "negative_roots",
            TableName::FormFactorSamples => "formfactor_samples",
            TableName::DerivedSamples => "derived_samples",
            TableName::GevpCorrelators => "gevp_correlators",
            TableName::GevpVectors => "gevp_vectors",
            TableName::GevpEnergies => "gevp_energies",
            TableName::OperatorComparison => "operator_comparison",
            TableName::Autocorrelation => "autocorrelation",
            TableName::BinningStudy => "binning_study",
        }
    }

    /// Build this table from the results (empty, with its columns, when the stage did not
    /// run).
    pub fn build(self, results: &RunResults) -> Result<Table> {
        let name = self.stem();
        match self {
            TableName::Final => final_results::final_table(name, results),
            TableName::FinalVariants => final_results::final_variants(name, results),
            TableName::FormFactors => formfactors::formfactors(name, &results.form_factors),
            TableName::Derived => formfactors::derived(name, results),
            TableName::Q2Fits => q2_fits::q2_fits(name, results),
            TableName::Spectrum => spectrum::energies(name, results),
            TableName::SpectrumFits => spectrum::fits(name, results),
            TableName::EffectiveMass => spectrum::effective_mass(name, results),
            TableName::Dispersion => spectrum::dispersion(name, results),
            TableName::CrossCheck => ratio::crosscheck(name, results),
            TableName::FormFactorCrossCheck => {
                formfactor_check::formfactor_crosscheck(name, results)
            }
            TableName::MatrixElements => ratio::matrix_elements(name, results),
            TableName::NegativeRoots => ratio::negative_roots(name, results),
            TableName::FormFactorSamples => Ok(formfactors::formfactor_samples(name, results)),
            TableName::DerivedSamples => Ok(formfactors::derived_samples(name, results)),
            TableName::GevpCorrelators => gevp::correlators(name, results),
            TableName::GevpVectors => gevp::vectors(name, results),
            TableName::GevpEnergies => gevp::energies(name, results),
            TableName::OperatorComparison => gevp::comparison(name, results),
            TableName::Autocorrelation => autocorrelation::autocorrelation(name, results),
            TableName::BinningStudy => autocorrelation::binning_study(name, results),
        }
    }
}

/// Every table of a run, by name.
#[derive(Clone, Debug)]
pub struct Tables(BTreeMap<TableName, Table>);

impl Tables {
    /// Build every table.
    pub fn build(results: &RunResults) -> Result<Tables> {
        TableName::ALL
            .iter()
            .map(|&n| Ok((n, n.build(results)?)))
            .collect::<Result<_>>()
            .map(Tables)
    }

    /// The table of this name.
    pub fn get(&self, name: TableName) -> &Table {
        // `build` fills every name of `TableName::ALL`
        &self.0[&name]
    }

    /// Write every table as CSV and JSON into `dir`.
    pub fn write(&self, dir: &Path) -> Result<()> {
        self.0.values().try_for_each(|t| write_table_files(t, dir))
    }
}

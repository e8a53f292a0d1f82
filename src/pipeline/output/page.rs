//! `report.html`: one section per part of the analysis, each built by its own function from
//! the tables (by name) and the figures (by kind).
//!
//! To add a section: write a function returning a [`Section`] from what it needs (the
//! [`Tables`], the rendered figures of some [`Plot`] kinds, the results) and push it in
//! [`report_page`] where it belongs in reading order.

use super::tables::{summary_table, TableName, Tables};
use crate::kinematics::Hadron;
use crate::pipeline::plan::Plan;
use crate::pipeline::run::RunResults;
use crate::pipeline::spec::Plot;
use crate::ratio::{Flag, NegativeRootPolicy};
use crate::report::{readable, Block, Cell, Report, Section, Table};

/// A figure rendered to SVG.
pub struct Rendered {
    /// The kind of plot.
    pub kind: Plot,
    /// File stem under `plots/`.
    pub name: String,
    /// The chart's title, used as caption.
    pub caption: String,
    /// The SVG text.
    pub svg: String,
}

/// The whole page.
pub fn report_page(
    plan: &Plan,
    results: &RunResults,
    tables: &Tables,
    figures: &[Rendered],
) -> Report {
    let e = &plan.spec.ensemble;
    let title = if e.label.is_empty() {
        "formfactory run".to_string()
    } else {
        format!("formfactory run: {}", e.label)
    };
    let mut report = Report::new(title);
    // a stage-limited run shows the sections of the stages it ran
    let has_form_factors = !results.form_factors.is_empty();
    report.sections = [
        has_form_factors.then(|| final_results(results, tables, figures)),
        Some(overview(plan, results)),
        has_form_factors.then(|| form_factors(results, tables, figures)),
        results
            .data
            .is_some()
            .then(|| autocorrelation(tables, figures)),
        variational(results, tables, figures),
        results
            .spectrum
            .is_some()
            .then(|| spectrum(tables, figures)),
        results
            .channels
            .is_some()
            .then(|| excited_states(plan, results, tables, figures)),
        Some(Section::new("Warnings").with(Block::Warnings(results.warnings.clone()))),
        Some(settings_and_timing(plan, results)),
    ]
    .into_iter()
    .flatten()
    .collect();
    report
}

/// The figures of some kinds, as blocks in the order given.
fn figure_blocks(figures: &[Rendered], kinds: &[Plot]) -> Vec<Block> {
    kinds
        .iter()
        .flat_map(|k| figures.iter().filter(move |f| f.kind == *k))
        .map(|f| Block::Svg {
            svg: f.svg.clone(),
            caption: format!("{} (plots/{}.svg)", f.caption, f.name),
        })
        .collect()
}

fn section(heading: &str, blocks: Vec<Block>) -> Section {
    blocks
        .into_iter()
        .fold(Section::new(heading), |s, b| s.with(b))
}

fn overview(plan: &Plan, results: &RunResults) -> Section {
    let spec = &plan.spec;
    let e = &spec.ensemble;
    let mut text = format!(
        "Ensemble {}³ × {}, a = {} fm, hadron of spin {}. ",
        e.l,
        e.t.map(|t| t as usize)
            .or(results.data.as_ref().map(|d| d.t_extent))
            .unwrap_or(0),
        e.spacing_fm,
        match e.hadron {
            Hadron::Spin0 => "0",
            Hadron::Spin1Half => "1/2",
        }
    );
    if let Some(d) = &results.data {
        text.push_str(&format!(
            "{} configurations in {} bins of {}; {} with {} samples. ",
            d.n_configs,
            d.n_bins,
            spec.resampling.bin_size,
            match spec.resampling.method {
                crate::pipeline::spec::ResamplingMethod::Jackknife => "jackknife",
                crate::pipeline::spec::ResamplingMethod::Bootstrap => "bootstrap",
            },
            d.n_samples
        ));
    }
    text.push_str(&format!("Stages run up to {}. ", plan.last_stage.name()));
    text.push_str(if !results.final_results.is_empty() {
        "Every estimator is tabulated and cross-checked; the final values above average \
         over them."
    } else if results.channels.is_some() {
        "The run stopped after the ratio stage: its result is the cross-check of the \
         excited-state estimators below."
    } else {
        "No matrix elements were computed."
    });
    let mut s = Section::new("Overview").with(Block::Paragraph(text));
    if !results.form_factors.is_empty() {
        s = s.with(Block::Table(summary_table(results)));
    }
    s
}

/// The final values with their error budget, first on the page.
fn final_results(results: &RunResults, tables: &Tables, figures: &[Rendered]) -> Section {
    let Some(first) = results.final_results.first() else {
        return Section::new("Final results").with(Block::Paragraph(
            "No final values: the run stopped before the form factors.".to_string(),
        ));
    };
    let rule = match &first.budget.rule {
        crate::error_budget::Rule::Reference { late: true } => "Each value is the result of \
             the two-state fit without its smallest source–sink separation (the two-state fit \
             over every separation, else the summation, where it is missing), averaged with \
             equal weights over the Q² models, written value(stat)(sys); the summation result \
             and the plateaus are checks. The systematic error adds in quadrature the change \
             of the two-state result when the smallest separation is added, the part of it \
             that its own statistical error does not explain (exc), the spread \
             of the plateau separations when plateaus make the value (fit), the spread of the \
             Q² models (model) and the renormalization error (Z); final_variants.csv lists \
             every variant with its weight or why it has none."
            .to_string(),
        crate::error_budget::Rule::Reference { late: false } => {
            "Each value is the two-state result (the \
             summation result where there is no two-state fit), averaged with equal weights \
             over the Q² models, written value(stat)(sys); the summation result and the \
             plateaus are checks. The systematic error adds in quadrature the part of the \
             summation − two-state difference that its own statistical error does not \
             explain (exc), the spread of the plateau separations when plateaus make the value \
             (fit), the spread of the Q² models (model) and the renormalization error (Z); \
             final_variants.csv lists every variant with its weight or why it has none \
             (excited_states.two_state_late: false; by default the two-state fit without its \
             smallest separation gives the value)."
                .to_string()
        }
        crate::error_budget::Rule::Pinned(e) => format!(
            "The final values are pinned to the {e} estimator (final_value.pin); the \
             systematic error holds only the Q² model spread and the renormalization error."
        ),
    };
    let rule = match results.data.as_ref().map(|d| d.n_bins) {
        Some(bins) if first.budget.student_t != 1.0 => format!(
            "{rule} The statistical error (stat) is the resampled error times {:.3}, the \
             Student-t factor for {bins} bins ({} degrees of freedom): with an error estimated \
             from so few bins, value ± 2 stat is then a 95.45 % interval, as for a normal \
             distribution (docs/methods.md §4).",
            first.budget.student_t,
            bins - 1
        ),
        _ => rule,
    };
    let mut blocks = vec![
        Block::Paragraph(rule),
        Block::Table(super::budget_table::budget_table(results)),
    ];
    blocks.extend(figure_blocks(figures, &[Plot::FinalVariants]));
    blocks.push(Block::Table(readable(tables.get(TableName::FinalVariants))));
    let ff_check = tables.get(TableName::FormFactorCrossCheck);
    if !ff_check.rows.is_empty() {
        // (no rows when the run computed one estimator only)
        blocks.push(formfactor_crosscheck_text(results));
        blocks.push(Block::Table(readable(ff_check)));
    }
    section("Final results", blocks)
}

/// The counts of the form-factor cross-check (each comparison once) and what the final
/// values did with the plateaus.
fn formfactor_crosscheck_text(results: &RunResults) -> Block {
    use crate::ratio::formfactor_check::{tally, BIAS_DISTANCE, TREND_SIGMA};
    let checks = crate::pipeline::final_results::formfactor_checks(results);
    let t = tally(checks.iter().flat_map(|c| &c.rows));
    let plateau_weighted = results
        .final_results
        .iter()
        .flat_map(|r| &r.budget.variants)
        .any(|w| w.weight > 0.0 && w.variant.estimator.tsep().is_some());
    let use_of_plateaus = match results.final_results.first().map(|r| &r.budget.rule) {
        Some(crate::error_budget::Rule::Pinned(e)) => {
            format!("The final values are pinned to {e} (final_value.pin).")
        }
        _ if plateau_weighted => "Some final values rest on plateaus (no summation or \
             two-state result there): read their flags."
            .to_string(),
        _ => "The final values leave the plateaus out and use the summation and two-state \
             results (rule above); the flags show what the plateaus would have cost."
            .to_string(),
    };
    Block::Paragraph(format!(
        "Cross-check per form factor and Q² shell (formfactor_crosscheck.csv): {} comparisons \
         with the reference (two-state if present, else summation), {} of them more than 2 \
         sigma apart, and {} steps of the plateaus between neighbouring tsep, {} of them above \
         2 sigma (the error of each difference from its own resamples). Plateau form factors \
         flagged as biased by excited states: {} of {} (more than {BIAS_DISTANCE} of its own \
         errors from the reference, or more than {TREND_SIGMA} sigma from the plateau at the \
         next larger tsep, or below a flagged plateau). {use_of_plateaus}",
        t.reference, t.reference_above_2sigma, t.trend, t.trend_above_2sigma, t.biased, t.plateaus
    ))
}

fn form_factors(results: &RunResults, tables: &Tables, figures: &[Rendered]) -> Section {
    let mut blocks = figure_blocks(figures, &[Plot::FormFactors]);
    blocks.push(Block::Table(readable(tables.get(TableName::FormFactors))));
    let derived = tables.get(TableName::Derived);
    if !derived.rows.is_empty() {
        blocks.push(Block::Table(readable(derived)));
    }
    blocks.extend(z_expansion_choices(results));
    section("Form factors", blocks)
}

/// Every z-expansion's prior and its `kmax + 1` refit side by side (docs/methods.md §6), so
/// a reader sees how much the prior and the truncation decide.
fn z_expansion_choices(results: &RunResults) -> Vec<Block> {
    use crate::q2::Shape;
    let mut t = Table::new(
        "z_expansion_choices",
        &[
            "method",
            "form_factor",
            "model",
            "prior",
            "kmax",
            "G0",
            "G0_error",
            "r2_fm2",
            "r2_fm2_error",
            "kmax_next",
            "G0_next",
            "G0_next_error",
            "r2_next_fm2",
            "r2_next_fm2_error",
            "G0_shift_sigma",
            "r2_shift_sigma",
        ],
    );
    for f in &results.q2_fits {
        let (Shape::ZExpansion(e), Some(k)) = (&f.fit.shape, &f.fit.kmax_study) else {
            continue;
        };
        let fm2 = f.fit.units.length2_to_fm2().unwrap_or(f64::NAN);
        let prior = e.prior.map_or("none".to_string(), |p| {
            format!("N({}, {:.4}²)", p.mean, p.width)
        });
        let row = vec![
            Cell::from(f.method.to_string()),
            Cell::from(f.form_factor.name()),
            Cell::from(f.model.as_str()),
            Cell::from(prior),
            Cell::from(e.kmax),
            Cell::Float(f.fit.g0.central),
            Cell::Float(f.fit.g0.error()),
            Cell::Float(f.fit.r2.central * fm2),
            Cell::Float(f.fit.r2.error() * fm2),
            Cell::from(k.kmax),
            Cell::Float(k.g0.central),
            Cell::Float(k.g0.error()),
            Cell::Float(k.r2.central * fm2),
            Cell::Float(k.r2.error() * fm2),
            Cell::Float(k.g0_shift_sigma),
            Cell::Float(k.r2_shift_sigma),
        ];
        if t.push_row(row).is_err() {
            return Vec::new();
        }
    }
    if t.rows.is_empty() {
        return Vec::new();
    }
    vec![
        Block::Paragraph(
            "z-expansion choices: the Gaussian prior on every a_k/a_0 (prior: auto takes the \
             width max(5, 2 max_k |c_k/c_0|), c_k the central dipole fit expanded in z with the \
             same t_cut, t0 and kmax; the prior's uncertainty enters every resample), and the \
             same fit with kmax + 1; a shift of G(0) or r² by more than 1 sigma of the kmax \
             fit is also a warning."
                .to_string(),
        ),
        Block::Table(readable(&t)),
    ]
}

/// The variational analysis: GEVP figures, fitted energies, and the optimised against the
/// single-operator results side by side.
fn variational(results: &RunResults, tables: &Tables, figures: &[Rendered]) -> Option<Section> {
    let v = results.variational.as_ref()?;
    let g = &v.settings;
    let mut blocks = vec![Block::Paragraph(format!(
        "GEVP C(t) v = lambda C(t0) v over the operators {:?} with t0 = {}; the optimised operators use the ground-state eigenvectors of t_ref = {} (fixed-vector solution) and replace the single operators in every later stage. gevp_correlators.csv and gevp_vectors.csv hold the principal correlators, their effective energies and the eigenvectors at every t.",
        v.operators, g.t0, g.t_ref
    ))];
    blocks.extend(figure_blocks(
        figures,
        &[Plot::GevpEnergies, Plot::GevpVectors],
    ));
    blocks.push(Block::Table(tables.get(TableName::GevpEnergies).clone()));
    if let Some(c) = &results.comparison {
        blocks.push(Block::Paragraph(format!(
            "Optimised operators beside operator `{}` alone (spectrum.gevp.compare_operator): ground energies, matrix elements (real part) and form factors per estimator.",
            c.operator
        )));
        blocks.push(Block::Table(
            tables.get(TableName::OperatorComparison).clone(),
        ));
    }
    Some(section("Variational analysis", blocks))
}

/// The integrated autocorrelation times and the binning study of the representative points.
fn autocorrelation(tables: &Tables, figures: &[Rendered]) -> Section {
    let mut blocks = vec![
        Block::Paragraph(
            "Integrated autocorrelation time (Gamma method, Wolff 2004) of a few representative \
             data points on the configurations before binning, and the binned error at the \
             run's bin size; bins should span about 2 tau_int (column bins_long_enough). The \
             binning study (binning_study.csv, and the figure) shows the error of each mean \
             against the bin size: it levels off near sqrt(2 tau_int) times the unbinned error \
             once bins are long enough. The last rows give tau_int of the binned data, pooled \
             over every time series of each table (n_configs is then the number of bins); \
             where it exceeds 1/2 the bins are still autocorrelated, and the note says whether \
             every resampled deviation was inflated by sqrt(2 tau_int) for it \
             (resampling.autocorrelation_inflation)."
                .to_string(),
        ),
        Block::Table(readable(tables.get(TableName::Autocorrelation))),
    ];
    blocks.extend(figure_blocks(figures, &[Plot::Binning]));
    section("Autocorrelation", blocks)
}

fn spectrum(tables: &Tables, figures: &[Rendered]) -> Section {
    let mut blocks = figure_blocks(figures, &[Plot::EffectiveMass, Plot::Dispersion]);
    blocks.push(Block::Table(readable(tables.get(TableName::Spectrum))));
    section("Spectrum", blocks)
}

fn excited_states(
    plan: &Plan,
    results: &RunResults,
    tables: &Tables,
    figures: &[Rendered],
) -> Section {
    let mut blocks = figure_blocks(figures, &[Plot::Ratio, Plot::Summation]);
    let crosscheck = tables.get(TableName::CrossCheck);
    let flag = Cell::from(Flag::Above2Sigma.name());
    let flagged = crosscheck
        .rows
        .iter()
        .filter(|r| r.last() == Some(&flag))
        .count();
    blocks.push(Block::Paragraph(format!(
        "Cross-check: {} comparisons, {flagged} differ by more than 2 sigma (error of each \
         difference from its own resamples); see crosscheck.csv.",
        crosscheck.rows.len()
    )));
    blocks.extend(negative_roots(plan, results, tables));
    if tables.get(TableName::FormFactors).rows.is_empty() {
        // a run stopped after the ratio: the cross-check is its result
        blocks.push(Block::Table(super::summary::crosscheck_summary(results)));
        blocks.push(Block::Table(readable(crosscheck)));
    }
    section("Excited states", blocks)
}

/// One sentence on the negative products under the ratio's square root, and the rows of
/// `negative_roots.csv` that have any.
fn negative_roots(plan: &Plan, results: &RunResults, tables: &Tables) -> Vec<Block> {
    let Some(channels) = &results.channels else {
        return Vec::new();
    };
    let counts: Vec<_> = channels.values().map(|c| c.ratio.negative_root).collect();
    let affected = counts.iter().filter(|n| n.samples > 0).count();
    if affected == 0 {
        return vec![Block::Paragraph(format!(
            "Negative products under the square root of the ratio: none in {} channels.",
            counts.len()
        ))];
    }
    let values: usize = counts.iter().map(|n| n.samples).sum();
    let points: usize = counts.iter().map(|n| n.points_affected).sum();
    let dropped: usize = counts.iter().map(|n| n.points_dropped).sum();
    let policy = match plan.spec.excited_states.negative_root {
        NegativeRootPolicy::AbsValue => {
            "`negative_root: abs_value` took the root of the absolute value".to_string()
        }
        NegativeRootPolicy::DropPoint => format!(
            "`negative_root: drop_point` dropped {dropped} points and took the root of the \
             absolute value for the other samples"
        ),
    };
    let table = tables.get(TableName::NegativeRoots);
    let mut shown = table.clone();
    // the column `negative_values`, after the channel columns and `points`
    let at = table.columns.iter().position(|c| c == "negative_values");
    shown
        .rows
        .retain(|r| at.is_some_and(|i| r.get(i) != Some(&Cell::from(0usize))));
    vec![
        Block::Paragraph(format!(
            "Negative products under the square root of the ratio: {values} values (central or \
             resamples) in {points} (tsep, tau) points of {affected} of {} channels; {policy}. \
             See negative_roots.csv.",
            counts.len()
        )),
        Block::Table(shown),
    ]
}

/// The pipeline file as written (with the `--set` overrides), every setting as resolved
/// (defaults filled in, numbers to six significant digits) and the time per stage.
fn settings_and_timing(plan: &Plan, results: &RunResults) -> Section {
    let mut timing = Table::new("time per stage", &["stage", "seconds"]);
    for (s, t) in &results.timings {
        timing.rows.push(vec![
            Cell::from(s.as_str()),
            Cell::Text(format!("{:.3}", t.as_secs_f64())),
        ]);
    }
    let mut s = Section::new("Settings and timing");
    if let Ok(written) = std::fs::read_to_string(&plan.source) {
        s = s
            .with(Block::Paragraph(format!(
                "The pipeline file {} as written:",
                plan.source.display()
            )))
            .with(Block::Pre(written));
    }
    if !plan.overrides.is_empty() {
        s = s.with(Block::Paragraph(format!(
            "Changed on the command line: {}.",
            plan.overrides
                .iter()
                .map(|o| format!("`--set {o}`"))
                .collect::<Vec<_>>()
                .join(", ")
        )));
    }
    s.with(Block::Paragraph(
        "Every setting as the run used it, defaults included:".to_string(),
    ))
    .with(Block::Pre(super::settings_text::resolved(&plan.spec)))
    .with(Block::Table(timing))
}

//! Turning a run's results into the files of its run directory: the tables (CSV and JSON),
//! per-resample values, SVG plots, `report.html` and `manifest.json`, through the generic
//! writers of [`crate::report`]. Also the short terminal summary.

use super::run::{FormFactorRow, RunResults};
use super::spec::Plot;
use super::Plan;
use crate::data::norm2;
use crate::ratio::{ChannelKey, ChannelResult, ReIm};
use crate::report::{
    render_svg, render_text, samples_table, table::write_table_files, value_error, Block, Cell,
    Chart, Manifest, Report, Section, Series, Table,
};
use crate::resample::Resampled;
use crate::Result;
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

fn float(x: f64) -> Cell {
    Cell::Float(x)
}

fn opt(x: Option<f64>) -> Cell {
    Cell::Float(x.unwrap_or(f64::NAN))
}

/// `formfactors`: one row per method, form factor and Q² shell.
pub fn formfactor_table(rows: &[FormFactorRow]) -> Result<Table> {
    let mut t = Table::new(
        "formfactors",
        &[
            "method",
            "form_factor",
            "q2_lat",
            "q2_gev2",
            "value",
            "error_stat",
            "error_z",
            "error_total",
            "n_channels",
            "chi2_dof",
            "current",
            "shell",
        ],
    );
    for r in rows {
        t.push_row(vec![
            Cell::from(r.method.as_str()),
            Cell::from(r.form_factor.name()),
            float(r.q2.central),
            opt(r.q2_gev2.as_ref().map(|q| q.central)),
            float(r.value.value.central),
            float(r.value.error_stat),
            float(r.value.error_z),
            float(r.value.error_total),
            Cell::from(r.n_channels),
            opt(r.chi2_dof),
            Cell::from(format!("{:?}", r.kind).to_lowercase()),
            Cell::from(r.shell.as_str()),
        ])?;
    }
    Ok(t)
}

/// `derived`: quantities from the Q² fits.
pub fn derived_table(results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        "derived",
        &["method", "model", "quantity", "value", "error", "unit"],
    );
    for d in &results.derived {
        t.push_row(vec![
            Cell::from(d.method.as_str()),
            Cell::from(d.model.as_str()),
            Cell::from(d.quantity.as_str()),
            float(d.value.central),
            float(d.error),
            Cell::from(d.unit.as_str()),
        ])?;
    }
    Ok(t)
}

/// `spectrum`: energies per momentum and state with the quality of the fit they come from.
pub fn spectrum_table(results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        "spectrum",
        &[
            "px", "py", "pz", "state", "energy", "error", "t_min", "t_max", "n_states", "chi2_dof",
            "p_value",
        ],
    );
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for (p, m) in &sp.per_momentum {
        for (n, e) in m.energies.iter().enumerate() {
            // the ground state is the model average; excited states come from the best
            // multi-state fit
            let fit = if n == 0 {
                Some(&m.chosen)
            } else {
                m.excited.as_ref()
            };
            let q = |f: fn(&crate::spectrum::ChosenFit) -> f64| opt(fit.map(f));
            t.push_row(vec![
                Cell::from(p[0]),
                Cell::from(p[1]),
                Cell::from(p[2]),
                Cell::from(n),
                float(e.central),
                float(e.error()),
                q(|f| f.t_min as f64),
                q(|f| f.t_max as f64),
                q(|f| f.n_states as f64),
                q(|f| f.chi2_per_dof),
                q(|f| f.p_value),
            ])?;
        }
    }
    Ok(t)
}

/// `dispersion`: fitted energies against the continuum and lattice dispersion relations.
pub fn dispersion_table(results: &RunResults) -> Result<Table> {
    let mut t = Table::new(
        "dispersion",
        &[
            "px",
            "py",
            "pz",
            "fitted",
            "error",
            "continuum",
            "lattice",
            "continuum_sigma",
            "lattice_sigma",
        ],
    );
    let Some(sp) = &results.spectrum else {
        return Ok(t);
    };
    for r in &sp.dispersion {
        t.push_row(vec![
            Cell::from(r.momentum[0]),
            Cell::from(r.momentum[1]),
            Cell::from(r.momentum[2]),
            float(r.fitted.central),
            float(r.fitted.error()),
            float(r.continuum.central),
            float(r.lattice.central),
            float(r.continuum_sigma),
            float(r.lattice_sigma),
        ])?;
    }
    Ok(t)
}

fn channel_cells(k: &ChannelKey) -> Vec<Cell> {
    vec![
        Cell::from(k.pf[0]),
        Cell::from(k.pf[1]),
        Cell::from(k.pf[2]),
        Cell::from(k.q[0]),
        Cell::from(k.q[1]),
        Cell::from(k.q[2]),
        Cell::from(k.current.name()),
        Cell::from(k.projector.name()),
    ]
}

const CHANNEL_COLUMNS: [&str; 8] = [
    "pfx",
    "pfy",
    "pfz",
    "qx",
    "qy",
    "qz",
    "current",
    "projector",
];

/// `crosscheck`: every pair of excited-state estimates per channel and part.
pub fn crosscheck_table(results: &RunResults) -> Result<Table> {
    let mut cols: Vec<&str> = CHANNEL_COLUMNS.to_vec();
    cols.extend([
        "method",
        "reference",
        "part",
        "difference",
        "error",
        "sigma",
        "flag",
    ]);
    let mut t = Table::new("crosscheck", &cols);
    let Some(channels) = &results.channels else {
        return Ok(t);
    };
    for (k, c) in channels {
        for row in &c.crosscheck {
            for (part, d) in [("re", &row.re), ("im", &row.im)] {
                let mut cells = channel_cells(k);
                cells.extend([
                    Cell::from(method_name(&row.method)),
                    Cell::from(method_name(&row.reference)),
                    Cell::from(part),
                    float(d.value.central),
                    float(d.error),
                    float(d.sigma),
                    Cell::from(format!("{:?}", row.flag).to_lowercase()),
                ]);
                t.push_row(cells)?;
            }
        }
    }
    Ok(t)
}

fn method_name(m: &crate::ratio::crosscheck::Method) -> String {
    use crate::ratio::crosscheck::Method as M;
    match m {
        M::Plateau { tsep } => format!("plateau-tsep{tsep}"),
        M::Summation => "summation".into(),
        M::TwoState => "two-state".into(),
    }
}

/// `matrix_elements`: the bare ratio estimate per channel and method.
pub fn matrix_element_table(results: &RunResults) -> Result<Table> {
    let mut cols: Vec<&str> = CHANNEL_COLUMNS.to_vec();
    cols.extend([
        "method",
        "re",
        "re_error",
        "im",
        "im_error",
        "chi2_dof_re",
        "chi2_dof_im",
    ]);
    let mut t = Table::new("matrix_elements", &cols);
    let Some(channels) = &results.channels else {
        return Ok(t);
    };
    for (k, c) in channels {
        let mut push = |method: String, fit: &crate::ratio::ReImFit| -> Result<()> {
            let mut cells = channel_cells(k);
            let per_dof = |q: &crate::ratio::FitQuality| {
                if q.dof > 0 {
                    q.chi2 / q.dof as f64
                } else {
                    f64::NAN
                }
            };
            cells.extend([
                Cell::from(method),
                float(fit.value.re.central),
                float(fit.value.re.error()),
                float(fit.value.im.central),
                float(fit.value.im.error()),
                float(per_dof(&fit.quality_re)),
                float(per_dof(&fit.quality_im)),
            ]);
            t.push_row(cells)
        };
        for p in &c.plateaus {
            push(format!("plateau-tsep{}", p.tsep), &p.fit)?;
        }
        if let Some(s) = &c.summation {
            push("summation".into(), &s.slope)?;
        }
        if let Some(s) = &c.two_state {
            push("two-state".into(), &s.m)?;
        }
    }
    Ok(t)
}

/// The terminal summary: form factors per Q² (rows) and method (columns), `value(error)`
/// with the total error, plus the derived quantities.
pub fn summary_table(results: &RunResults) -> Table {
    let methods: Vec<String> = {
        let mut seen = Vec::new();
        for r in &results.form_factors {
            if !seen.contains(&r.method) {
                seen.push(r.method.clone());
            }
        }
        seen
    };
    let mut cols = vec!["form_factor", "Q2_GeV2"];
    cols.extend(methods.iter().map(String::as_str));
    let mut t = Table::new("summary", &cols);
    let mut cells: BTreeMap<(String, i64), (f64, BTreeMap<String, String>)> = BTreeMap::new();
    for r in &results.form_factors {
        let q2 = r.q2_gev2.as_ref().map_or(r.q2.central, |q| q.central);
        // shells are keyed by Q² rounded to 1e-6 GeV², so methods line up in one row
        let key = (r.form_factor.name().to_string(), (q2 * 1e6).round() as i64);
        let entry = cells.entry(key).or_insert((q2, BTreeMap::new()));
        entry.1.insert(
            r.method.clone(),
            value_error(r.value.value.central, r.value.error_total),
        );
    }
    for ((ff, _), (q2, by_method)) in cells {
        let mut row = vec![Cell::from(ff), Cell::Text(format!("{q2:.4}"))];
        row.extend(
            methods
                .iter()
                .map(|m| Cell::Text(by_method.get(m).cloned().unwrap_or_default())),
        );
        t.rows.push(row);
    }
    t
}

/// Text for the terminal after a run: the summary table, derived quantities, warnings
/// count and where the report is.
pub fn terminal_summary(results: &RunResults) -> String {
    let mut out = String::new();
    if !results.form_factors.is_empty() {
        out.push_str(&render_text(&summary_table(results), 60));
    }
    if !results.derived.is_empty() {
        let mut t = Table::new("derived", &["method", "model", "quantity", "value", "unit"]);
        for d in &results.derived {
            t.rows.push(vec![
                Cell::from(d.method.as_str()),
                Cell::from(d.model.as_str()),
                Cell::from(d.quantity.as_str()),
                Cell::Text(value_error(d.value.central, d.error)),
                Cell::from(d.unit.as_str()),
            ]);
        }
        out.push_str(&render_text(&t, 40));
    }
    out.push_str(&format!("final method: {}\n", results.final_method));
    if !results.warnings.is_empty() {
        out.push_str(&format!(
            "{} warning(s); see manifest.json and report.html\n",
            results.warnings.len()
        ));
    }
    if let Some(dir) = &results.run_dir {
        let report = tidy_for_display(&dir.join("report.html"));
        out.push_str(&format!("report: {}\n", report.display()));
    }
    out
}

/// Write every file of the run directory into `dir`.
pub fn write_all(plan: &Plan, results: &mut RunResults, dir: &Path) -> Result<()> {
    let tables = [
        formfactor_table(&results.form_factors)?,
        derived_table(results)?,
        spectrum_table(results)?,
        dispersion_table(results)?,
        crosscheck_table(results)?,
        matrix_element_table(results)?,
    ];
    for t in &tables {
        write_table_files(t, dir)?;
    }
    let labels: Vec<String> = results
        .form_factors
        .iter()
        .map(|r| format!("{}|{}|{}", r.method, r.form_factor.name(), r.shell))
        .collect();
    let items: Vec<(&str, &Resampled)> = labels
        .iter()
        .zip(&results.form_factors)
        .map(|(l, r)| (l.as_str(), &r.value.value))
        .collect();
    write_table_files(&samples_table("formfactor_samples", &items), dir)?;
    let derived_labels: Vec<String> = results
        .derived
        .iter()
        .map(|d| format!("{}|{}|{}", d.method, d.model, d.quantity))
        .collect();
    let items: Vec<(&str, &Resampled)> = derived_labels
        .iter()
        .zip(&results.derived)
        .map(|(l, d)| (l.as_str(), &d.value))
        .collect();
    write_table_files(&samples_table("derived_samples", &items), dir)?;

    let figures = figures(plan, results);
    let plot_dir = dir.join("plots");
    std::fs::create_dir_all(&plot_dir).map_err(|e| crate::Error::io(&plot_dir, e))?;
    let mut rendered = Vec::new();
    for (name, chart) in &figures {
        match render_svg(chart) {
            Ok(svg) => {
                let path = plot_dir.join(format!("{name}.svg"));
                std::fs::write(&path, &svg).map_err(|e| crate::Error::io(&path, e))?;
                rendered.push((name.clone(), chart.title.clone(), svg));
            }
            Err(e) => results.warnings.push(format!("plot {name}: {e}")),
        }
    }
    report_page(plan, results, &tables, &rendered).write(&dir.join("report.html"))?;
    manifest(plan, results)?.write(&dir.join("manifest.json"))
}

fn manifest(plan: &Plan, results: &RunResults) -> Result<Manifest> {
    let settings = serde_json::json!({
        "pipeline": serde_json::to_value(&plan.spec).unwrap_or(serde_json::Value::Null),
        "overrides": plan.overrides,
        "last_stage": plan.last_stage.name(),
        "jobs": plan.jobs,
    });
    let seed = match plan.spec.resampling.method {
        super::spec::ResamplingMethod::Bootstrap => Some(plan.spec.resampling.seed),
        super::spec::ResamplingMethod::Jackknife => None,
    };
    let mut m = Manifest::start(settings, seed);
    m.add_input(&plan.source)?;
    for p in plan.input_files() {
        m.add_input(&p)?;
    }
    for (stage, t) in &results.timings {
        m.add_stage(stage.as_str(), *t);
    }
    m.warnings = results.warnings.clone();
    Ok(m)
}

fn report_page(
    plan: &Plan,
    results: &RunResults,
    tables: &[Table],
    figures: &[(String, String, String)],
) -> Report {
    let spec = &plan.spec;
    let e = &spec.ensemble;
    let title = if e.label.is_empty() {
        "formfactory run".to_string()
    } else {
        format!("formfactory run: {}", e.label)
    };
    let mut report = Report::new(title);
    let mut overview = format!(
        "Ensemble {}^3 x {}, a = {} fm, hadron of spin {}. ",
        e.l,
        e.t,
        e.spacing_fm,
        match e.hadron {
            crate::kinematics::Hadron::Spin0 => "0",
            crate::kinematics::Hadron::Spin1Half => "1/2",
        }
    );
    if let Some(d) = &results.data {
        overview.push_str(&format!(
            "{} configurations in {} bins of {}; {:?} with {} samples. ",
            d.n_configs, d.n_bins, spec.resampling.bin_size, spec.resampling.method, d.n_samples
        ));
    }
    overview.push_str(&format!(
        "Stages run up to `{}`. The final numbers use the {} method (excited_states.final_method); \
         every method is tabulated and cross-checked.",
        plan.last_stage.name(),
        results.final_method
    ));
    let mut first = Section::new("Overview").with(Block::Paragraph(overview));
    if !results.form_factors.is_empty() {
        first = first.with(Block::Table(summary_table(results)));
    }
    report.sections.push(first);
    let fig_section = |heading: &str, prefix: &str| {
        let mut s = Section::new(heading);
        for (name, caption, svg) in figures.iter().filter(|f| f.0.starts_with(prefix)) {
            s = s.with(Block::Svg {
                svg: svg.clone(),
                caption: format!("{caption} (plots/{name}.svg)"),
            });
        }
        s
    };
    let mut ff = fig_section("Form factors", "formfactor");
    ff = ff.with(Block::Table(tables[0].clone()));
    if !tables[1].rows.is_empty() {
        ff = ff.with(Block::Table(tables[1].clone()));
    }
    report.sections.push(ff);
    let mut sp = fig_section("Spectrum", "effective-mass");
    for s in fig_section("", "dispersion").blocks {
        sp = sp.with(s);
    }
    sp = sp.with(Block::Table(tables[2].clone()));
    report.sections.push(sp);
    let mut ex = fig_section("Excited states", "ratio");
    for s in fig_section("", "summation").blocks {
        ex = ex.with(s);
    }
    let flagged = tables[4]
        .rows
        .iter()
        .filter(|r| matches!(r.last(), Some(Cell::Text(f)) if f == "above2sigma"))
        .count();
    ex = ex.with(Block::Paragraph(format!(
        "Cross-check: {} comparisons, {flagged} differ by more than 2 sigma (error of each \
         difference from its own resamples); see crosscheck.csv.",
        tables[4].rows.len()
    )));
    report.sections.push(ex);
    report
        .sections
        .push(Section::new("Warnings").with(Block::Warnings(results.warnings.clone())));
    let mut timing = String::new();
    for (s, t) in &results.timings {
        timing.push_str(&format!("{s:<14} {:>9.3} s\n", t.as_secs_f64()));
    }
    let settings = serde_yaml_ng::to_string(&plan.spec).unwrap_or_default();
    report.sections.push(
        Section::new("Settings and timing")
            .with(Block::Pre(settings))
            .with(Block::Pre(timing)),
    );
    report
}

fn err_of(r: &Resampled) -> f64 {
    r.error()
}

/// The plots the pipeline asks for, by file name.
fn figures(plan: &Plan, results: &RunResults) -> Vec<(String, Chart)> {
    let want = |p: Plot| plan.spec.output.plots.contains(&p);
    let mut out = Vec::new();
    if want(Plot::EffectiveMass) {
        out.extend(effective_mass_chart(results));
    }
    if want(Plot::Dispersion) {
        out.extend(dispersion_chart(results));
    }
    let shown = showcase_channels(results);
    if want(Plot::Ratio) {
        for (i, (k, c)) in shown.iter().enumerate() {
            out.push((format!("ratio-{i}"), ratio_chart(k, c)));
        }
    }
    if want(Plot::Summation) {
        for (i, (k, c)) in shown.iter().enumerate() {
            if let Some(ch) = summation_chart(k, c) {
                out.push((format!("summation-{i}"), ch));
            }
        }
    }
    if want(Plot::FormFactors) {
        out.extend(formfactor_charts(plan, results));
    }
    out
}

fn effective_mass_chart(results: &RunResults) -> Option<(String, Chart)> {
    let sp = results.spectrum.as_ref()?;
    let mut momenta: Vec<_> = sp.per_momentum.iter().collect();
    momenta.sort_by_key(|(p, _)| norm2(**p));
    let mut seen = BTreeSet::new();
    let mut chart = Chart {
        title: "Effective mass per momentum".into(),
        x_label: "t".into(),
        y_label: "m_eff(t) (lattice units)".into(),
        ..Chart::default()
    };
    // one representative momentum per |n|^2, at most five
    for (p, m) in momenta {
        if seen.len() >= 5 || !seen.insert(norm2(*p)) {
            continue;
        }
        let colour = seen.len() - 1;
        let (mut x, mut y, mut e) = (Vec::new(), Vec::new(), Vec::new());
        for (t, v) in m.effective_mass.iter().enumerate() {
            if let Some(v) = v {
                if v.is_finite() && err_of(v) < 0.1 {
                    x.push(t as f64);
                    y.push(v.central);
                    e.push(err_of(v));
                }
            }
        }
        let en = m.ground_energy();
        let label = format!("p=({},{},{})", p[0], p[1], p[2]);
        let (t0, t1) = (m.chosen.t_min as f64, m.chosen.t_max as f64);
        chart.series.push(Series::points(label, colour, x, y, e));
        chart.series.push(Series::band(
            String::new(),
            colour,
            vec![t0, t1],
            vec![en.central - err_of(en); 2],
            vec![en.central + err_of(en); 2],
        ));
    }
    Some(("effective-mass".into(), chart))
}

fn dispersion_chart(results: &RunResults) -> Option<(String, Chart)> {
    let sp = results.spectrum.as_ref()?;
    if sp.dispersion.is_empty() {
        return None;
    }
    let p2 = |p: [f64; 3]| p.iter().map(|x| x * x).sum::<f64>();
    let mut rows: Vec<_> = sp.dispersion.iter().collect();
    rows.sort_by(|a, b| p2(a.p).total_cmp(&p2(b.p)));
    let x: Vec<f64> = rows.iter().map(|r| p2(r.p)).collect();
    let chart = Chart {
        title: "Dispersion relation".into(),
        x_label: "p^2 (lattice units)".into(),
        y_label: "E (lattice units)".into(),
        series: vec![
            Series::points(
                "fitted",
                0,
                x.clone(),
                rows.iter().map(|r| r.fitted.central).collect(),
                rows.iter().map(|r| err_of(&r.fitted)).collect(),
            ),
            Series::line(
                "continuum",
                1,
                x.clone(),
                rows.iter().map(|r| r.continuum.central).collect(),
            ),
            Series::line(
                "lattice",
                2,
                x,
                rows.iter().map(|r| r.lattice.central).collect(),
            )
            .dashed(),
        ],
        ..Chart::default()
    };
    Some(("dispersion".into(), chart))
}

/// The part (re or im) that carries the signal of a final estimate.
fn signal_part(v: &ReIm) -> bool {
    v.re.central.abs() / err_of(&v.re).max(1e-300) >= v.im.central.abs() / err_of(&v.im).max(1e-300)
}

fn pick(v: &ReIm, re: bool) -> &Resampled {
    if re {
        &v.re
    } else {
        &v.im
    }
}

/// Up to four channels with the most precise final estimates, for the ratio plots.
fn showcase_channels(results: &RunResults) -> Vec<(&ChannelKey, &ChannelResult)> {
    let Some(channels) = &results.channels else {
        return Vec::new();
    };
    let mut all: Vec<_> = channels
        .iter()
        .map(|(k, c)| {
            let part = pick(&c.final_estimate, signal_part(&c.final_estimate));
            let snr = part.central.abs() / err_of(part).max(1e-300);
            (k, c, snr)
        })
        .filter(|(_, _, s)| s.is_finite())
        .collect();
    all.sort_by(|a, b| b.2.total_cmp(&a.2));
    let mut seen = BTreeSet::new();
    all.into_iter()
        .filter(|(k, _, _)| seen.insert(k.current))
        .take(4)
        .map(|(k, c, _)| (k, c))
        .collect()
}

fn ratio_chart(k: &ChannelKey, c: &ChannelResult) -> Chart {
    let re = signal_part(&c.final_estimate);
    let part = if re { "Re" } else { "Im" };
    let mut chart = Chart {
        title: format!("Ratio {part} R(tsep, tau): {k}"),
        x_label: "tau - tsep/2".into(),
        y_label: format!("{part} R"),
        ..Chart::default()
    };
    for (i, tsep) in c.ratio.tseps().into_iter().enumerate() {
        // the plateau fit of this tsep as a band over its fit range, in the points' colour
        if let Some(pl) = c.plateaus.iter().find(|p| p.tsep == tsep) {
            let v = pick(&pl.fit.value, re);
            let mid = tsep as f64 / 2.0;
            let x = vec![pl.tau_range.0 as f64 - mid, pl.tau_range.1 as f64 - mid];
            chart.series.push(Series::band(
                String::new(),
                i,
                x,
                vec![v.central - err_of(v); 2],
                vec![v.central + err_of(v); 2],
            ));
        }
        let pts: Vec<_> = c.ratio.points.iter().filter(|p| p.tsep == tsep).collect();
        chart.series.push(
            Series::points(
                format!("tsep={tsep}"),
                i,
                pts.iter()
                    .map(|p| p.tau as f64 - tsep as f64 / 2.0)
                    .collect(),
                pts.iter().map(|p| pick(&p.value, re).central).collect(),
                pts.iter().map(|p| err_of(pick(&p.value, re))).collect(),
            )
            .offset(0.05 * i as f64),
        );
    }
    let f = pick(&c.final_estimate, re);
    let half = c.ratio.tseps().last().map_or(1.0, |t| *t as f64 / 2.0);
    chart.series.push(Series::band(
        format!("final ({:?})", c.final_method),
        6,
        vec![-half, half],
        vec![f.central - err_of(f); 2],
        vec![f.central + err_of(f); 2],
    ));
    chart
}

fn summation_chart(k: &ChannelKey, c: &ChannelResult) -> Option<Chart> {
    let s = c.summation.as_ref()?;
    let re = signal_part(&s.slope.value);
    let part = if re { "Re" } else { "Im" };
    let x: Vec<f64> = s.tseps.iter().map(|t| *t as f64).collect();
    let slope = pick(&s.slope.value, re).central;
    let icpt = pick(&s.intercept, re).central;
    Some(Chart {
        title: format!("Summed ratio {part} S(tsep): {k}"),
        x_label: "tsep".into(),
        y_label: format!("{part} S"),
        series: vec![
            Series::points(
                "S(tsep)",
                0,
                x.clone(),
                s.sums.iter().map(|v| pick(v, re).central).collect(),
                s.sums.iter().map(|v| err_of(pick(v, re))).collect(),
            ),
            Series::line(
                format!(
                    "fit, slope {}",
                    value_error(slope, err_of(pick(&s.slope.value, re)))
                ),
                1,
                x.clone(),
                x.iter().map(|t| icpt + slope * t).collect(),
            ),
        ],
        ..Chart::default()
    })
}

/// `a/b/../c` shown as `a/c`. For display only: files are opened with the path as resolved,
/// since lexical clean-up is wrong where a directory is a symbolic link.
fn tidy_for_display(p: &Path) -> std::path::PathBuf {
    use std::path::Component;
    let mut out = std::path::PathBuf::new();
    for c in p.components() {
        match c {
            Component::ParentDir
                if matches!(out.components().next_back(), Some(Component::Normal(_))) =>
            {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other),
        }
    }
    out
}

/// Plot and legend order of methods: plateaus by increasing `tsep`, then summation, then
/// two-state (string order would put `plateau-tsep10` before `plateau-tsep8`).
fn method_order(m: &str) -> (u8, u32) {
    match m.strip_prefix("plateau-tsep").and_then(|t| t.parse().ok()) {
        Some(tsep) => (0, tsep),
        None if m == "summation" => (1, 0),
        None => (2, 0),
    }
}

fn formfactor_charts(plan: &Plan, results: &RunResults) -> Vec<(String, Chart)> {
    let to_gev2 = (crate::kinematics::HBARC_GEV_FM / plan.spec.ensemble.spacing_fm).powi(2);
    let mut by_ff: BTreeMap<&str, BTreeMap<&str, Vec<&FormFactorRow>>> = BTreeMap::new();
    for r in &results.form_factors {
        by_ff
            .entry(r.form_factor.name())
            .or_default()
            .entry(r.method.as_str())
            .or_default()
            .push(r);
    }
    by_ff
        .into_iter()
        .map(|(ff, methods)| {
            let mut chart = Chart {
                title: format!("{ff} versus Q^2"),
                x_label: "Q^2 (GeV^2)".into(),
                y_label: ff.to_string(),
                ..Chart::default()
            };
            let mut methods: Vec<_> = methods.into_iter().collect();
            methods.sort_by_key(|(m, _)| method_order(m));
            for (i, (m, rows)) in methods.into_iter().enumerate() {
                let q = |r: &FormFactorRow| r.q2_gev2.as_ref().map_or(r.q2.central, |q| q.central);
                chart.series.push(
                    Series::points(
                        m,
                        i,
                        rows.iter().map(|r| q(r)).collect(),
                        rows.iter().map(|r| r.value.value.central).collect(),
                        rows.iter().map(|r| r.value.error_total).collect(),
                    )
                    .offset(0.004 * i as f64),
                );
            }
            // the final method's Q² fits as bands over the range of the data
            let q_max = results
                .form_factors
                .iter()
                .filter(|r| r.form_factor.name() == ff)
                .map(|r| r.q2.central)
                .fold(0.0, f64::max);
            let fits = results
                .q2_fits
                .iter()
                .filter(|f| f.form_factor.name() == ff && f.method == results.final_method);
            for (j, f) in fits.enumerate() {
                let grid: Vec<f64> = (0..=40).map(|i| q_max * i as f64 / 40.0).collect();
                let vals: Vec<Resampled> = grid.iter().map(|q| f.fit.evaluate(*q)).collect();
                chart.series.push(Series::band(
                    format!("{} {}", f.method, f.model),
                    7 + j,
                    grid.iter().map(|q| q * to_gev2).collect(),
                    vals.iter().map(|v| v.central - v.error()).collect(),
                    vals.iter().map(|v| v.central + v.error()).collect(),
                ));
            }
            (format!("formfactor-{ff}"), chart)
        })
        .collect()
}

//! The combination's output, in the same style as a run: tables (CSV and JSON), SVG plots of
//! each quantity against a² and m_π² with the fit band, one HTML report and a manifest,
//! written all-or-nothing through [`crate::report::RunDir`].

use super::combine::{Combination, QuantityResult};
use super::fit::{Abscissa, Extrapolation, Point};
use super::load::Campaign;
use crate::report::table::write_table_files;
use crate::report::{
    render_svg, Block, Cell, Chart, Manifest, Report, RunDir, Section, Series, Table,
};
use crate::{Error, Result};
use std::path::{Path, PathBuf};

/// `physical_point`: the result per quantity with statistical and systematic errors.
pub fn physical_table(comb: &Combination) -> Result<Table> {
    let mut t = Table::new(
        "physical_point",
        &[
            "quantity",
            "method",
            "model",
            "q2_gev2",
            "form",
            "unit",
            "value",
            "error_stat",
            "error_sys",
            "error_total",
            "chi2_dof",
            "p_value",
            "n_ensembles",
            "n_variants",
        ],
    );
    for q in &comb.quantities {
        let (v, stat, sys) = q.physical().unwrap_or((f64::NAN, f64::NAN, f64::NAN));
        let base = q.fits.first().and_then(|f| f.fit.as_ref().ok());
        t.push_row(vec![
            Cell::from(q.spec.quantity.as_str()),
            Cell::from(q.spec.method.as_str()),
            Cell::from(if q.spec.q2_gev2.is_some() {
                ""
            } else {
                q.spec.model.as_str()
            }),
            Cell::Float(q.spec.q2_gev2.unwrap_or(f64::NAN)),
            Cell::from(form_name(q)),
            Cell::from(q.unit.as_str()),
            Cell::Float(v),
            Cell::Float(stat),
            Cell::Float(sys),
            Cell::Float(stat.hypot(sys)),
            Cell::Float(base.map_or(f64::NAN, Extrapolation::chi2_dof)),
            Cell::Float(base.map_or(f64::NAN, |b| b.p_value)),
            Cell::from(q.fits.first().map_or(0, |f| f.points.len())),
            Cell::from(q.fits.iter().filter(|f| f.fit.is_ok()).count()),
        ])?;
    }
    Ok(t)
}

fn form_name(q: &QuantityResult) -> String {
    let f = serde_json::to_value(q.spec.form)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default();
    if q.spec.volume {
        format!("{f}+volume")
    } else {
        f
    }
}

/// `fits`: every variant's fit with its parameters and quality.
pub fn fits_table(comb: &Combination) -> Result<Table> {
    let mut t = Table::new(
        "fits",
        &[
            "quantity",
            "variant",
            "n_ensembles",
            "c0",
            "c0_error",
            "c_a2",
            "c_a2_error",
            "c_mpi2",
            "c_mpi2_error",
            "c_L",
            "c_L_error",
            "chi2",
            "dof",
            "p_value",
        ],
    );
    for q in &comb.quantities {
        for f in &q.fits {
            let Ok(fit) = &f.fit else { continue };
            let mut row = vec![
                Cell::from(q.name()),
                Cell::from(f.variant.as_str()),
                Cell::from(f.points.len()),
            ];
            for k in 0..4 {
                let (v, e) = match fit.params.get(k) {
                    Some(&v) => (v, fit.error_of(|p| p[k])),
                    None => (f64::NAN, f64::NAN),
                };
                row.push(Cell::Float(v));
                row.push(Cell::Float(e));
            }
            row.push(Cell::Float(fit.chi2));
            row.push(Cell::from(fit.dof));
            row.push(Cell::Float(fit.p_value));
            t.push_row(row)?;
        }
    }
    Ok(t)
}

/// `points`: what each ensemble contributed, per quantity and variant.
pub fn points_table(comb: &Combination) -> Result<Table> {
    let mut t = Table::new(
        "points",
        &[
            "quantity",
            "variant",
            "ensemble",
            "a_fm",
            "a_fm_error",
            "mpi_gev",
            "mpi_L",
            "value",
            "error",
        ],
    );
    for q in &comb.quantities {
        for f in &q.fits {
            for p in &f.points {
                let a = p.spacing_fm.value;
                t.push_row(vec![
                    Cell::from(q.name()),
                    Cell::from(f.variant.as_str()),
                    Cell::from(p.ensemble.as_str()),
                    Cell::Float(a),
                    Cell::Float(p.spacing_fm.error),
                    Cell::Float(p.pion_mass * super::fit::HBARC_GEV_FM / a),
                    Cell::Float(p.pion_mass * f64::from(p.l)),
                    Cell::Float(p.value.central),
                    Cell::Float(p.value.error()),
                ])?;
            }
        }
    }
    Ok(t)
}

/// File-name form of a quantity name.
fn slug(s: &str) -> String {
    let mut out = String::new();
    for ch in s.chars() {
        if ch.is_ascii_alphanumeric() || ch == '.' {
            out.push(ch);
        } else if !out.ends_with('_') {
            out.push('_');
        }
    }
    out.trim_matches('_').to_string()
}

/// The two charts of one fit: against a² (at the physical pion mass, infinite volume) and
/// against m_π² (in the continuum); points shifted to those conditions with the fit itself.
pub fn charts(q: &QuantityResult, points: &[Point], fit: &Extrapolation) -> [Chart; 2] {
    let form = fit.form;
    let phys = form.mpi_phys * form.mpi_phys;
    let unit = if q.unit.is_empty() {
        String::new()
    } else {
        format!(" [{}]", q.unit)
    };
    let mut out = Vec::new();
    for along_a in [true, false] {
        let at = |v: f64| Abscissa {
            a2: if along_a { v } else { 0.0 },
            mpi2: if along_a { phys } else { v },
            mpi_l: f64::INFINITY,
        };
        let xs: Vec<f64> = fit
            .x
            .iter()
            .map(|x| if along_a { x.a2 } else { x.mpi2 })
            .collect();
        let x_max = xs
            .iter()
            .copied()
            .fold(if along_a { 0.0 } else { phys }, f64::max)
            * 1.1;
        let x_min = if along_a {
            0.0
        } else {
            phys.min(xs.iter().copied().fold(f64::INFINITY, f64::min)) * 0.9
        };
        let grid: Vec<f64> = (0..=40)
            .map(|i| x_min + (x_max - x_min) * f64::from(i) / 40.0)
            .collect();
        let mid: Vec<f64> = grid
            .iter()
            .map(|&v| form.eval(&fit.params, at(v)))
            .collect();
        let err: Vec<f64> = grid
            .iter()
            .map(|&v| fit.error_of(|p| form.eval(p, at(v))))
            .collect();
        let shifted: Vec<f64> = points
            .iter()
            .zip(&fit.x)
            .map(|(p, x)| {
                p.value.central - form.eval(&fit.params, *x)
                    + form.eval(&fit.params, at(if along_a { x.a2 } else { x.mpi2 }))
            })
            .collect();
        let errs: Vec<f64> = points.iter().map(|p| p.value.error()).collect();
        let (x_label, cond) = if along_a {
            (
                "a² [fm²]",
                format!("at m_π = {} GeV, infinite volume", form.mpi_phys),
            )
        } else {
            (
                "m_π² [GeV²]",
                "in the continuum, infinite volume".to_string(),
            )
        };
        let x0 = if along_a { 0.0 } else { phys };
        out.push(Chart {
            title: format!(
                "{} against {}, {cond}",
                q.name(),
                if along_a { "a²" } else { "m_π²" }
            ),
            x_label: x_label.into(),
            y_label: format!("{}{unit}", q.spec.quantity),
            series: vec![
                Series::band(
                    "fit (1σ)",
                    0,
                    grid.clone(),
                    mid.iter().zip(&err).map(|(m, e)| m - e).collect(),
                    mid.iter().zip(&err).map(|(m, e)| m + e).collect(),
                ),
                Series::line("", 0, grid, mid),
                Series::points("ensembles (shifted)", 1, xs, shifted, errs),
                Series::points(
                    "physical point",
                    2,
                    vec![x0],
                    vec![fit.value()],
                    vec![fit.error()],
                ),
            ],
            ..Chart::default()
        });
    }
    let [a, b]: [Chart; 2] = out
        .try_into()
        .unwrap_or_else(|_| [Chart::default(), Chart::default()]);
    [a, b]
}

/// Write the combination into `dir` (replaced only with `force`); returns the final path.
pub fn write(c: &Campaign, comb: &Combination, dir: &Path, force: bool) -> Result<PathBuf> {
    let run = RunDir::create(dir, force)?;
    let tables = [
        physical_table(comb)?,
        fits_table(comb)?,
        points_table(comb)?,
    ];
    for t in &tables {
        write_table_files(t, run.path())?;
    }
    let plots = run.path().join("plots");
    std::fs::create_dir_all(&plots).map_err(|e| Error::io(&plots, e))?;
    let mut warnings = comb.warnings.clone();
    let mut figures = Vec::new();
    for q in &comb.quantities {
        let Some(base) = q.fits.first() else { continue };
        let Ok(fit) = &base.fit else { continue };
        for (chart, axis) in charts(q, &base.points, fit).iter().zip(["a2", "mpi2"]) {
            match render_svg(chart) {
                Ok(svg) => {
                    let path = plots.join(format!("{}-{axis}.svg", slug(&q.name())));
                    std::fs::write(&path, &svg).map_err(|e| Error::io(&path, e))?;
                    figures.push((chart.title.clone(), svg));
                }
                Err(e) => warnings.push(format!("plot of {}: {e}", q.name())),
            }
        }
    }
    report(c, comb, &tables, &figures, &warnings).write(&run.path().join("report.html"))?;
    let mut m = Manifest::start(
        serde_json::json!({ "campaign": c.spec, "output": c.output }),
        None,
    );
    m.add_input(&c.source)?;
    m.add_input(&c.pipeline)?;
    for t in &comb.used {
        for f in ["derived.csv", "derived_samples.csv"] {
            let p = t.run_dir.join(f);
            if p.is_file() {
                m.add_input(&p)?;
            }
        }
    }
    m.warnings = warnings;
    m.write(&run.path().join("manifest.json"))?;
    run.commit()
}

fn report(
    c: &Campaign,
    comb: &Combination,
    tables: &[Table],
    figures: &[(String, String)],
    warnings: &[String],
) -> Report {
    let mut r = Report::new(format!("formfactory campaign: {}", c.spec.name));
    let n_ens = c.spec.ensembles.len();
    r.sections
        .push(Section::new("Overview").with(Block::Paragraph(format!(
        "{n_ens} ensembles, {} variants, {} runs combined. Each quantity is fitted per variant \
         against a² and m_π² (forms named in the table) and evaluated at a = 0, infinite volume \
         and m_π = {} GeV. Statistical errors by the super-jackknife (each ensemble's resamples \
         varied alone, contributions added; the spacing error as a one-sigma shift); the \
         systematic error is the largest deviation of a variant from the base variant.",
        super::expand::variants(c).len(),
        comb.used.len(),
        c.spec.combine.physical_point.pion_mass_gev
    ))));
    let mut results = Section::new("Results at the physical point");
    for t in tables {
        results.blocks.push(Block::Table(t.clone()));
    }
    r.sections.push(results);
    let mut plots = Section::new("Fits");
    for (caption, svg) in figures {
        plots.blocks.push(Block::Svg {
            svg: svg.clone(),
            caption: caption.clone(),
        });
    }
    r.sections.push(plots);
    r.sections
        .push(Section::new("Warnings").with(Block::Warnings(warnings.to_vec())));
    r
}

//! The output layer from outside: tables read back with independent parsers (`csv`,
//! `serde_json`), charts of every kind the pipeline draws, the self-contained HTML page,
//! the manifest and the all-or-nothing result directory.
//!
//! Set `FORMFACTORY_PLOT_DIR` to a directory to keep the rendered SVG files for viewing.

use formfactory::report::html::{Block, Report, Section};
use formfactory::report::manifest::{sha256_hex, Manifest};
use formfactory::report::plot::{render_svg, Chart, Legend, ReferenceLine, Series};
use formfactory::report::rundir::RunDir;
use formfactory::report::table::{samples_table, write_csv, write_json, Cell, Table};
use formfactory::resample::{Resampled, Scheme};
use std::path::Path;

use crate::common::listing;

fn mixed_table() -> Table {
    let mut t = Table::new("form_factors", &["channel", "n", "value", "error"]);
    let rows: Vec<Vec<Cell>> = vec![
        vec![
            "G_E, \"quoted\"".into(),
            3.into(),
            0.1.into(),
            (1.0 / 3.0).into(),
        ],
        vec![
            "G_M; comma, here".into(),
            (-7).into(),
            1e-300.into(),
            6.02214076e23.into(),
        ],
        vec![
            "missing".into(),
            0.into(),
            f64::NAN.into(),
            f64::INFINITY.into(),
        ],
    ];
    for r in rows {
        t.push_row(r).unwrap();
    }
    t
}

#[test]
fn csv_round_trip_is_exact() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("t.csv");
    let t = mixed_table();
    write_csv(&t, &path).unwrap();
    let mut r = csv::Reader::from_path(&path).unwrap();
    let header: Vec<String> = r.headers().unwrap().iter().map(String::from).collect();
    assert_eq!(header, t.columns);
    let recs: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
    assert_eq!(recs.len(), 3);
    for (rec, row) in recs.iter().zip(&t.rows) {
        for (field, cell) in rec.iter().zip(row) {
            match cell {
                Cell::Text(s) => assert_eq!(field, s),
                Cell::Int(i) => assert_eq!(field.parse::<i64>().unwrap(), *i),
                // Exactness is the property under test: the bits must survive the text form.
                Cell::Float(x) if x.is_nan() => assert_eq!(field, "NaN"),
                Cell::Float(x) => assert_eq!(field.parse::<f64>().unwrap().to_bits(), x.to_bits()),
            }
        }
    }
}

#[test]
fn json_is_an_array_of_objects_in_column_order_with_nan_as_null() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("t.json");
    let t = mixed_table();
    write_json(&t, &path).unwrap();
    let text = std::fs::read_to_string(&path).unwrap();
    let v: serde_json::Value = serde_json::from_str(&text).unwrap();
    let rows = v.as_array().unwrap();
    assert_eq!(rows.len(), 3);
    assert_eq!(rows[0]["channel"], "G_E, \"quoted\"");
    assert_eq!(rows[1]["n"], -7);
    assert_eq!(
        rows[0]["value"].as_f64().unwrap().to_bits(),
        0.1f64.to_bits()
    );
    assert_eq!(
        rows[1]["value"].as_f64().unwrap().to_bits(),
        1e-300f64.to_bits()
    );
    assert!(rows[2]["value"].is_null());
    assert!(rows[2]["error"].is_null());
    // Keys in column order within each object (serde_json's map would sort them).
    let first = &text[..text.find('}').unwrap()];
    let pos: Vec<usize> = t
        .columns
        .iter()
        .map(|c| first.find(&format!("\"{c}\"")).unwrap())
        .collect();
    assert!(pos.windows(2).all(|w| w[0] < w[1]), "{first}");
}

#[test]
fn ragged_table_is_refused_before_writing() {
    let dir = tempfile::tempdir().unwrap();
    let mut t = Table::new("bad", &["a", "b"]);
    t.rows.push(vec![1.into()]);
    let err = write_csv(&t, &dir.path().join("bad.csv"))
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("table `bad`: row 1 has 1 cells, expected 2"),
        "{err}"
    );
    assert!(!dir.path().join("bad.csv").exists());
}

#[test]
fn samples_table_round_trips_through_csv() {
    let dir = tempfile::tempdir().unwrap();
    let a = Resampled::new(0.5, vec![0.49, 0.51, 0.5 + 1e-12], Scheme::Jackknife);
    let b = Resampled::new(-1.25, vec![-1.2, -1.3], Scheme::Bootstrap);
    let t = samples_table("samples", &[("G_E(Q2=0.1)", &a), ("g_A", &b)]);
    let path = dir.path().join("samples.csv");
    write_csv(&t, &path).unwrap();
    let mut r = csv::Reader::from_path(&path).unwrap();
    assert_eq!(
        r.headers().unwrap(),
        vec!["quantity", "scheme", "central", "sample", "value"]
    );
    let recs: Vec<csv::StringRecord> = r.records().map(|x| x.unwrap()).collect();
    assert_eq!(recs.len(), 5);
    assert_eq!(&recs[2][0], "G_E(Q2=0.1)");
    assert_eq!(&recs[2][1], "jackknife");
    assert_eq!(&recs[2][3], "2");
    assert_eq!(
        recs[2][4].parse::<f64>().unwrap().to_bits(),
        (0.5 + 1e-12f64).to_bits()
    );
    assert_eq!(&recs[4][1], "bootstrap");
    assert_eq!(
        recs[4][2].parse::<f64>().unwrap().to_bits(),
        (-1.25f64).to_bits()
    );
}

/// Smooth, deterministic curves shaped like the quantities the pipeline plots (no physics
/// is checked here; only the drawing).
fn charts() -> Vec<(&'static str, Chart)> {
    let t: Vec<f64> = (1..=22).map(f64::from).collect();
    let meff = |e: f64, t: f64| e + 0.35 * (-0.5 * t).exp();
    let err = |t: f64| 0.002 * (0.12 * t).exp();
    let mut eff = Chart {
        title: "Effective energy, p = (0,0,0) and (0,0,1)".into(),
        x_label: "t / a".into(),
        y_label: "a E_eff(t)".into(),
        legend: Legend::UpperRight,
        ..Chart::default()
    };
    for (k, (e, name)) in [(0.45, "p² = 0"), (0.52, "p² = 1")].into_iter().enumerate() {
        let fit: Vec<f64> = vec![6.0, 16.0];
        eff.series.push(Series::band(
            format!("fit {name}"),
            k,
            fit.clone(),
            vec![e - 0.004; 2],
            vec![e + 0.004; 2],
        ));
        eff.series.push(Series::line("", k, fit, vec![e; 2]));
        eff.series.push(
            Series::points(
                name,
                k,
                t.clone(),
                t.iter().map(|&t| meff(e, t)).collect(),
                t.iter().map(|&t| err(t)).collect(),
            )
            .offset(0.15 * k as f64),
        );
    }

    let corr = Chart {
        title: "Two-point correlator".into(),
        x_label: "t / a".into(),
        y_label: "C(t)".into(),
        log_y: true,
        series: vec![Series::points(
            "p² = 0",
            0,
            t.clone(),
            t.iter()
                .map(|&t| 2e-3 * (-0.45 * t).exp() * (1.0 + 0.6 * (-0.5 * t).exp()))
                .collect(),
            t.iter()
                .map(|&t| 2e-3 * (-0.45 * t).exp() * 0.01 * (0.2 * t).exp())
                .collect(),
        )],
        ..Chart::default()
    };

    let mut ratio = Chart {
        title: "Ratio, V4, unpolarised, Q² shell 1".into(),
        x_label: "τ − t_sep / 2".into(),
        y_label: "R(τ, t_sep)".into(),
        ..Chart::default()
    };
    let two_state =
        |ts: f64, tau: f64| 1.2 - 0.25 * ((-0.5 * tau).exp() + (-0.5 * (ts - tau)).exp());
    for (k, ts) in [8.0, 10.0, 12.0, 14.0].into_iter().enumerate() {
        let taus: Vec<f64> = (1..ts as i32).map(f64::from).collect();
        let x: Vec<f64> = taus.iter().map(|tau| tau - ts / 2.0).collect();
        let y: Vec<f64> = taus.iter().map(|&tau| two_state(ts, tau)).collect();
        let e: Vec<f64> = taus.iter().map(|_| 0.004 * (0.15 * ts).exp()).collect();
        ratio
            .series
            .push(Series::points(format!("t_sep = {ts}"), k, x, y, e).offset(0.08 * k as f64));
        let fine: Vec<f64> = (0..=40)
            .map(|i| 1.0 + (ts - 2.0) * f64::from(i) / 40.0)
            .collect();
        ratio.series.push(
            Series::line(
                "",
                k,
                fine.iter().map(|tau| tau - ts / 2.0).collect(),
                fine.iter().map(|&tau| two_state(ts, tau)).collect(),
            )
            .dashed(),
        );
    }
    ratio.series.push(Series::band(
        "two-state M",
        6,
        vec![-7.0, 7.0],
        vec![1.19; 2],
        vec![1.21; 2],
    ));

    let tsep = [6.0, 8.0, 10.0, 12.0, 14.0];
    let summation = Chart {
        title: "Summed ratio".into(),
        x_label: "t_sep / a".into(),
        y_label: "S(t_sep)".into(),
        legend: Legend::UpperLeft,
        series: vec![
            Series::band(
                "linear fit",
                0,
                vec![5.0, 15.0],
                vec![0.3 + 1.18 * 5.0 - 0.08, 0.3 + 1.18 * 15.0 - 0.12],
                vec![0.3 + 1.22 * 5.0 + 0.08, 0.3 + 1.22 * 15.0 + 0.12],
            ),
            Series::line(
                "",
                0,
                vec![5.0, 15.0],
                vec![0.3 + 1.2 * 5.0, 0.3 + 1.2 * 15.0],
            ),
            Series::points(
                "data",
                1,
                tsep.to_vec(),
                tsep.iter().map(|t| 0.3 + 1.2 * t).collect(),
                tsep.iter().map(|t| 0.02 * t).collect(),
            ),
        ],
        ..Chart::default()
    };

    let q2: Vec<f64> = vec![0.0, 0.18, 0.35, 0.51, 0.66, 0.81];
    let dipole = |q: f64| 1.0 / (1.0 + q / 0.71).powi(2);
    let qq: Vec<f64> = (0..=50).map(|i| 0.9 * f64::from(i) / 50.0).collect();
    let mut ff = Chart {
        title: "G_E(Q²)".into(),
        x_label: "Q² [GeV²]".into(),
        y_label: "G_E".into(),
        series: vec![Series::band(
            "dipole fit",
            6,
            qq.clone(),
            qq.iter().map(|&q| dipole(q) * 0.97).collect(),
            qq.iter().map(|&q| dipole(q) * 1.03).collect(),
        )],
        ..Chart::default()
    };
    for (k, m) in ["plateau", "summation", "two-state"]
        .into_iter()
        .enumerate()
    {
        ff.series.push(
            Series::points(
                m,
                k,
                q2.clone(),
                q2.iter()
                    .map(|&q| dipole(q) * (1.0 + 0.02 * k as f64))
                    .collect(),
                q2.iter().map(|&q| 0.01 + 0.04 * q).collect(),
            )
            .offset(0.008 * (k as f64 - 1.0)),
        );
    }

    let cross = Chart {
        title: "Cross-check: differences in units of their error".into(),
        x_label: "channel".into(),
        y_label: "Δ / σ(Δ)".into(),
        y_range: Some((-3.0, 3.0)),
        reference_lines: [
            (0.0, ""),
            (1.0, "+1σ"),
            (-1.0, "−1σ"),
            (2.0, "+2σ"),
            (-2.0, "−2σ"),
        ]
        .into_iter()
        .map(|(y, l)| ReferenceLine { y, label: l.into() })
        .collect(),
        series: vec![
            Series::points(
                "plateau − two-state",
                0,
                (1..=8).map(f64::from).collect(),
                vec![0.3, -0.8, 1.4, 0.2, 2.3, -0.4, 0.9, -1.6],
                vec![0.0; 8],
            ),
            Series::points(
                "summation − two-state",
                1,
                (1..=8).map(f64::from).collect(),
                vec![-0.1, 0.5, 0.8, -0.3, 1.1, 0.0, -0.6, 0.4],
                vec![0.0; 8],
            )
            .offset(0.15),
        ],
        ..Chart::default()
    };

    vec![
        ("effective_mass", eff),
        ("correlator_log", corr),
        ("ratio", ratio),
        ("summation", summation),
        ("form_factor", ff),
        ("cross_check", cross),
    ]
}

#[test]
fn every_chart_kind_renders_to_svg() {
    let keep = std::env::var_os("FORMFACTORY_PLOT_DIR");
    for (name, chart) in charts() {
        let svg = render_svg(&chart).unwrap();
        assert!(svg.starts_with("<svg"), "{name}");
        assert!(svg.trim_end().ends_with("</svg>"), "{name}");
        assert_eq!(
            svg.matches("<text").count(),
            svg.matches("</text>").count(),
            "{name}"
        );
        assert!(
            svg.contains(&chart.x_label.replace('<', "&lt;")),
            "{name}: x label"
        );
        for s in chart.series.iter().filter(|s| !s.label.is_empty()) {
            assert!(svg.contains(&s.label), "{name}: legend entry `{}`", s.label);
        }
        if let Some(dir) = &keep {
            std::fs::write(Path::new(dir).join(format!("{name}.svg")), &svg).unwrap();
        }
    }
}

#[test]
fn chart_draws_every_finite_point_and_skips_the_rest() {
    let chart = Chart {
        title: "a < b & c".into(),
        series: vec![Series::points(
            "pts",
            0,
            vec![1.0, 2.0, 3.0, 4.0],
            vec![1.0, f64::NAN, 3.0, f64::INFINITY],
            vec![0.1, 0.1, f64::NAN, 0.1],
        )],
        legend: Legend::Hidden,
        ..Chart::default()
    };
    let svg = render_svg(&chart).unwrap();
    // Colour 0 draws circles: two finite points, no legend marker.
    assert_eq!(svg.matches("<circle").count(), 2);
    assert!(svg.contains("a &lt; b &amp; c"));
    // Log axis with nothing positive still renders.
    let empty = Chart {
        log_y: true,
        series: vec![Series::line("neg", 1, vec![1.0, 2.0], vec![-1.0, 0.0])],
        ..Chart::default()
    };
    assert!(render_svg(&empty).unwrap().starts_with("<svg"));
}

#[test]
fn report_page_is_self_contained_and_escaped() {
    let dir = tempfile::tempdir().unwrap();
    let svg = render_svg(&charts().remove(4).1).unwrap();
    let report = Report {
        title: "Run <demo>".into(),
        sections: vec![
            Section::new("Summary").with(Block::Table(mixed_table())),
            Section::new("Form factors").with(Block::Svg {
                svg,
                caption: "G_E & dipole".into(),
            }),
            Section::new("Settings").with(Block::Pre("fit:\n  tmin: 3 # <x>\n".into())),
            Section::new("Warnings").with(Block::Warnings(vec!["tsep 14: noisy <50%".into()])),
        ],
    };
    let path = dir.path().join("report.html");
    report.write(&path).unwrap();
    if let Some(keep) = std::env::var_os("FORMFACTORY_PLOT_DIR") {
        report.write(&Path::new(&keep).join("report.html")).unwrap();
    }
    let html = std::fs::read_to_string(&path).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    for external in ["http://", "https://", "src=", "@import", "url("] {
        assert!(!html.contains(external), "found `{external}`");
    }
    assert!(html.contains("<svg"));
    assert!(html.contains("G_E &amp; dipole"));
    assert!(html.contains("tmin: 3 # &lt;x&gt;"));
    assert!(html.contains("noisy &lt;50%"));
    assert!(!html.contains("<demo>"));
}

/// A directory as a run of the tool leaves it: files and the run marker.
fn write_tree(dir: &Path, tag: &str) {
    std::fs::create_dir_all(dir.join("plots")).unwrap();
    std::fs::write(
        dir.join(formfactory::report::Marker::Run.file_name()),
        "formfactory run directory\n",
    )
    .unwrap();
    std::fs::write(dir.join("a.csv"), format!("x\n{tag}\n")).unwrap();
    std::fs::write(dir.join("plots/b.svg"), format!("<svg>{tag}</svg>")).unwrap();
}

fn snapshot(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                out.push((
                    p.strip_prefix(dir).unwrap().display().to_string(),
                    std::fs::read(&p).unwrap(),
                ));
            }
        }
    }
    out.sort();
    out
}

#[test]
fn failed_run_leaves_previous_results_byte_identical() {
    let root = tempfile::tempdir().unwrap();
    let out = root.path().join("results");
    write_tree(&out, "old");
    let before = snapshot(&out);
    {
        let run = RunDir::create(&out, true).unwrap();
        write_tree(run.path(), "new");
        // The run fails here: the RunDir is dropped without commit.
    }
    assert_eq!(snapshot(&out), before);
    assert_eq!(listing(root.path()), vec!["results"]);
}

#[test]
fn existing_results_are_refused_without_force() {
    let root = tempfile::tempdir().unwrap();
    let out = root.path().join("results");
    write_tree(&out, "old");
    let before = snapshot(&out);
    let err = RunDir::create(&out, false).unwrap_err().to_string();
    assert!(
        err.contains("results") && err.contains("already exists"),
        "{err}"
    );
    assert_eq!(snapshot(&out), before);
    assert_eq!(listing(root.path()), vec!["results"]);
}

#[test]
fn force_replaces_previous_results_completely() {
    let root = tempfile::tempdir().unwrap();
    let out = root.path().join("results");
    write_tree(&out, "old");
    std::fs::write(out.join("stale.txt"), "from the old run").unwrap();
    let run = RunDir::create(&out, true).unwrap();
    write_tree(run.path(), "new");
    let mut m = Manifest::start(serde_json::json!({"seed": 7}), Some(7));
    let input = root.path().join("in.csv");
    std::fs::write(&input, "abc").unwrap();
    m.add_input(&input).unwrap();
    m.write(&run.path().join("manifest.json")).unwrap();
    assert_eq!(run.commit().unwrap(), out);
    assert!(!out.join("stale.txt").exists());
    assert_eq!(
        std::fs::read_to_string(out.join("a.csv")).unwrap(),
        "x\nnew\n"
    );
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("manifest.json")).unwrap()).unwrap();
    // FIPS 180-2, Appendix B.1.
    assert_eq!(
        manifest["inputs"][0]["sha256"],
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    );
    assert_eq!(manifest["inputs"][0]["sha256"], sha256_hex(b"abc"));
    assert_eq!(listing(root.path()), vec!["in.csv", "results"]);
}

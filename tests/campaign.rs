//! Integration tests: campaigns — validation with positions, expansion, the local runner
//! (skipping, failures, resubmission), the Slurm script, the combination fit against
//! analytic results, and the closure of the demo campaign against its known law.

use crate::common::{formfactory, repo_root, stdout, tempdir};
use formfactory::campaign::fit::{extrapolate, Form, Point, HBARC_GEV_FM};
use formfactory::campaign::spec::{FitForm, ValueError};
use formfactory::campaign::{self, combine, expand, local, slurm};
use formfactory::resample::{Resampled, Scheme};
use std::path::{Path, PathBuf};

/// The demo campaign's law (pipelines/campaign-demo.yaml): r² in fm² at spacing `a` (fm) and
/// pion mass `m` (GeV).
fn demo_law_r2(a: f64, m: f64) -> f64 {
    0.42 - 2.0 * a * a - 0.5 * (m * m - 0.135 * 0.135)
}

const DEMO: [&str; 4] = ["a12m350", "a09m350", "a09m250", "a06m300"];

/// The demo campaign with its output in `out`.
fn demo(out: &Path) -> campaign::Campaign {
    let mut c = campaign::load(&repo_root().join("pipelines/campaign-demo.yaml"))
        .expect("the demo campaign is valid");
    c.output = out.to_path_buf();
    c
}

#[test]
fn committed_schema_is_current() {
    let committed = std::fs::read_to_string(repo_root().join("schemas/campaign.schema.json"))
        .expect("schemas/campaign.schema.json exists");
    assert!(
        committed == campaign::schema_json(),
        "regenerate with `cargo run -- campaign schema > schemas/campaign.schema.json`"
    );
}

#[test]
fn demo_data_match_their_specs_and_the_law() {
    let root = repo_root().join("demo-data/campaign");
    for name in DEMO {
        let spec_path = root.join(format!("{name}.mock.yaml"));
        let text = std::fs::read_to_string(&spec_path).expect("spec exists");
        let spec = formfactory::mock::MockSpec::from_yaml(&text, name).expect("valid");
        let e = formfactory::mock::generate(&spec).expect("generates");
        let dir = root.join(name);
        let two = formfactory::io::read_twopt(&dir.join("twopt.csv")).expect("reads");
        let three = formfactory::io::read_threept(&dir.join("threept.csv")).expect("reads");
        assert!(two == e.twopt, "{name}: twopt.csv differs from its spec");
        assert!(
            three == e.threept,
            "{name}: threept.csv differs from its spec"
        );
        // the dipole mass follows the law: r² = 12 a² / M² (dipole of power 2)
        let v: serde_yaml_ng::Value = serde_yaml_ng::from_str(&text).expect("yaml");
        let a = v["ensemble"]["a_fm"].as_f64().expect("a_fm");
        let m_lat = v["hadron"]["states"][0]["mass"].as_f64().expect("mass");
        let mass = v["form_factors"]["F"]["mass"]
            .as_f64()
            .expect("dipole mass");
        let r2 = 12.0 * a * a / (mass * mass);
        let want = demo_law_r2(a, m_lat * HBARC_GEV_FM / a);
        assert!(
            ((r2 - want) / want).abs() < 1e-5,
            "{name}: r² {r2} from the spec, {want} from the law"
        );
    }
}

#[test]
fn check_reports_positions_and_near_misses() {
    let dir = tempdir();
    let src = std::fs::read_to_string(repo_root().join("pipelines/campaign-demo.yaml")).unwrap();
    let root = repo_root();
    let fixed = src
        .replace(
            "campaign-pion.yaml",
            &root
                .join("pipelines/campaign-pion.yaml")
                .display()
                .to_string(),
        )
        .replace(
            "../demo-data",
            &root.join("demo-data").display().to_string(),
        );
    let bad = fixed.replace("parallel: 2", "paralel: 2");
    let path = dir.path().join("c.yaml");
    std::fs::write(&path, &bad).unwrap();
    let err = campaign::load(&path).expect_err("misspelt key").to_string();
    let line = bad.lines().position(|l| l.starts_with("paralel")).unwrap() + 1;
    assert!(err.contains(&format!("c.yaml:{line}:1")), "{err}");
    assert!(err.contains("did you mean `parallel`"), "{err}");

    let dup = fixed.replace("name: a09m250", "name: a09m350");
    std::fs::write(&path, &dup).unwrap();
    let err = campaign::load(&path).expect_err("duplicate").to_string();
    assert!(
        err.contains("used twice") && err.contains("c.yaml:"),
        "{err}"
    );

    // an override of a key the pipeline does not have is found by `check`
    let wrong = fixed.replace("spectrum.t_min={from: 4", "spectrum.tmin={from: 4");
    std::fs::write(&path, &wrong).unwrap();
    let c = campaign::load(&path).expect("the file itself is valid");
    let err = campaign::check(&c)
        .expect_err("unknown pipeline key")
        .to_string();
    assert!(err.contains("tmin") && err.contains("c.yaml:"), "{err}");
}

#[test]
fn expansion_is_ensembles_times_variants_in_fixed_order() {
    let c = demo(Path::new("/nonexistent"));
    let tasks = expand::tasks(&c);
    assert_eq!(tasks.len(), 8);
    let labels: Vec<String> = tasks.iter().map(|t| t.label()).collect();
    assert_eq!(labels[0], "a12m350/tmin3");
    assert_eq!(labels[1], "a12m350/tmin4");
    assert_eq!(labels[7], "a06m300/tmin4");
    assert!(tasks.iter().enumerate().all(|(i, t)| t.index == i));
    // ensemble parameters first, the variant's overrides last (they win)
    assert!(tasks[1].sets[0] == "ensemble.label=a12m350");
    assert_eq!(
        tasks[1].sets.last().unwrap(),
        "spectrum.t_min={from: 4, to: 6}"
    );
}

#[test]
fn slurm_script_has_one_task_per_run_and_the_resources() {
    assert_eq!(slurm::array_spec(&[0, 1, 2, 5, 7, 8]), "0-2,5,7-8");
    assert_eq!(slurm::array_spec(&[3]), "3");
    let dir = tempdir();
    let c = demo(dir.path());
    let tasks = expand::tasks(&c);
    let chosen: Vec<&expand::Task> = tasks.iter().collect();
    let path =
        slurm::write_script(&c, &chosen, "all", Path::new("/opt/ff/bin/formfactory")).unwrap();
    let s = std::fs::read_to_string(&path).unwrap();
    for line in [
        "#SBATCH --array=0-7",
        "#SBATCH --partition=debug",
        "#SBATCH --time=00:10:00",
        "#SBATCH --cpus-per-task=1",
        "#SBATCH --mem=1G",
        "#SBATCH --job-name=ff-demo",
        "campaign task",
        "--index \"$SLURM_ARRAY_TASK_ID\"",
    ] {
        assert!(s.contains(line), "missing `{line}` in\n{s}");
    }
    assert!(s.contains(&format!(
        "--output={}/slurm/logs/%A_%a.log",
        dir.path().display()
    )));
    assert!(
        dir.path().join("slurm/logs").is_dir(),
        "log folder made before submission"
    );
    let none: Vec<&expand::Task> = Vec::new();
    assert!(slurm::write_script(&c, &none, "failed", Path::new("x")).is_err());
}

/// Points exactly on `y = c0 + ca a² + cm (m² - mphys²) + log term`, with jackknife samples
/// whose spread gives each point the error `sigma`.
fn exact_points(form: Form, c: [f64; 3], sigma: f64) -> Vec<Point> {
    let ens = [
        (0.12, 0.30, 16),
        (0.09, 0.25, 24),
        (0.09, 0.40, 24),
        (0.06, 0.20, 32),
        (0.06, 0.32, 32),
    ];
    ens.iter()
        .enumerate()
        .map(|(i, &(a, m_gev, l))| {
            let x = formfactory::campaign::fit::Abscissa {
                a2: a * a,
                mpi2: m_gev * m_gev,
                mpi_l: 0.0,
            };
            let y = form.eval(&c, x);
            // two jackknife samples y ± d give the error sqrt((N-1)/N * 2 d²) = d
            let d = sigma * (1.0 + 0.1 * i as f64);
            Point {
                ensemble: format!("e{i}"),
                spacing_fm: ValueError {
                    value: a,
                    error: 0.0,
                },
                pion_mass: m_gev * a / HBARC_GEV_FM,
                l,
                value: Resampled::new(y, vec![y + d, y - d], Scheme::Jackknife),
                fm_power: 2,
            }
        })
        .collect()
}

// An exact law is recovered exactly (chi² = 0), for the linear and both chiral-log forms;
// the super-jackknife error of a weighted linear fit equals the analytic parameter error
// sqrt((A^T W A)^-1)_00, since each parameter is linear in the data (textbook least squares).
#[test]
fn combination_fit_recovers_an_exact_law_with_analytic_errors() {
    for form in [
        FitForm::Linear,
        FitForm::PionRadiusLog,
        FitForm::NucleonRadiusLog,
    ] {
        let f = Form {
            form,
            volume: false,
            mpi_phys: 0.135,
        };
        let pts = exact_points(f, [0.45, -1.5, -0.3], 0.01);
        let fit = extrapolate(&pts, f).expect("fits");
        assert!(
            (fit.value() - 0.45).abs() < 1e-10,
            "{form:?}: {}",
            fit.value()
        );
        assert!((fit.params[1] + 1.5).abs() < 1e-8 && (fit.params[2] + 0.3).abs() < 1e-8);
        assert!(fit.chi2 < 1e-15 && fit.dof == 2);
        // analytic error
        let sig: Vec<f64> = pts.iter().map(|p| p.value.error()).collect();
        let a = nalgebra::DMatrix::from_fn(pts.len(), 3, |i, j| f.row(fit.x[i])[j] / sig[i]);
        let cov = (a.transpose() * a).try_inverse().unwrap();
        assert!((fit.error() - cov[(0, 0)].sqrt()).abs() < 1e-12 * cov[(0, 0)].sqrt().max(1.0));
    }
    // the pion log coefficient: -1/(16 π² F²) with F = 92.1 MeV is -0.0291 fm²
    let f = Form {
        form: FitForm::PionRadiusLog,
        volume: false,
        mpi_phys: 0.135,
    };
    assert!(
        (f.log_coefficient() + 0.02907).abs() < 2e-4,
        "{}",
        f.log_coefficient()
    );
}

// A spacing error moves a² and m_π(GeV) and rescales an fm² quantity: its block adds the
// squared shift of the result; here checked against a direct refit with the shifted spacing.
#[test]
fn spacing_error_adds_the_shifted_fit() {
    let f = Form {
        form: FitForm::Linear,
        volume: false,
        mpi_phys: 0.135,
    };
    let mut pts = exact_points(f, [0.45, -1.5, -0.3], 0.01);
    let stat = extrapolate(&pts, f).unwrap().error();
    pts[0].spacing_fm.error = 0.002;
    let with = extrapolate(&pts, f).unwrap();
    let mut shifted = pts.clone();
    shifted[0].spacing_fm = ValueError {
        value: 0.122,
        error: 0.0,
    };
    let s = (0.122_f64 / 0.12).powi(2);
    // the weights stay frozen: shift the samples with the central value
    let shift = shifted[0].value.central * (s - 1.0);
    shifted[0].value = shifted[0].value.map(|v| v + shift);
    // the pion mass in lattice units stays, its GeV value moves with a
    let moved = extrapolate(&shifted, f).unwrap().value();
    let want = (stat * stat + (moved - with.value()).powi(2)).sqrt();
    assert!(
        (with.error() - want).abs() < 1e-12,
        "{} vs {want}",
        with.error()
    );
}

#[test]
fn too_few_ensembles_or_zero_errors_are_refused() {
    let f = Form {
        form: FitForm::Linear,
        volume: true,
        mpi_phys: 0.135,
    };
    let pts = exact_points(Form { volume: false, ..f }, [0.45, -1.5, -0.3], 0.01);
    assert!(extrapolate(&pts[..3], f).is_err());
    let mut flat = pts.clone();
    flat[1].value = Resampled::new(0.4, vec![0.4, 0.4], Scheme::Jackknife);
    let err = extrapolate(&flat, Form { volume: false, ..f })
        .unwrap_err()
        .to_string();
    assert!(err.contains("e1"), "{err}");
}

/// The demo campaign's closure: r² and F(0) at the physical point within 2 sigma of the
/// law's value there (0.42 fm², 1).
#[test]
fn demo_campaign_recovers_the_truth_at_the_physical_point() {
    let dir = tempdir();
    let c = demo(dir.path());
    let tasks = expand::tasks(&c);
    let s = local::run_all(&c, &tasks, 2, false).expect("runs");
    assert_eq!((s.ran.len(), s.failed.len()), (8, 0), "{:?}", s.failed);
    let comb = combine::combine(&c).expect("combines");
    assert!(comb.warnings.is_empty(), "{:?}", comb.warnings);
    for (q, truth) in [(0, 0.42), (1, 1.0)] {
        let (v, stat, sys) = comb.quantities[q].physical().expect("a result");
        let total = stat.hypot(sys);
        println!(
            "{}: {v} ± {stat} (stat) ± {sys} (sys); truth {truth}",
            comb.quantities[q].name()
        );
        assert!((v - truth).abs() < 2.0 * total, "{v} ± {total} vs {truth}");
        assert!(stat > 0.0 && total < 0.05 * truth);
    }
    // a second run skips everything; the combined tables are written like a run's
    let again = local::run_all(&c, &tasks, 2, false).unwrap();
    assert_eq!((again.ran.len(), again.skipped.len()), (0, 8));
    let out = campaign::output::write(&c, &comb, &dir.path().join("combined"), false).unwrap();
    for f in [
        "physical_point.csv",
        "physical_point.json",
        "fits.csv",
        "points.csv",
        "report.html",
        "manifest.json",
        "plots/r2_F_summation_dipole-a2.svg",
        "plots/r2_F_summation_dipole-mpi2.svg",
    ] {
        assert!(out.join(f).is_file(), "{f}");
    }
    assert!(
        campaign::output::write(&c, &comb, &out, false).is_err(),
        "replacing needs force"
    );
}

/// Copy the demo data into `dir` and write a campaign there (one variant) pointing at it.
fn copied_campaign(dir: &Path) -> PathBuf {
    let root = repo_root();
    for name in DEMO {
        let d = dir.join("data").join(name);
        std::fs::create_dir_all(&d).unwrap();
        for f in ["twopt.csv", "threept.csv"] {
            std::fs::copy(
                root.join("demo-data/campaign").join(name).join(f),
                d.join(f),
            )
            .unwrap();
        }
    }
    std::fs::copy(
        root.join("pipelines/campaign-pion.yaml"),
        dir.join("base.yaml"),
    )
    .unwrap();
    let src = std::fs::read_to_string(root.join("pipelines/campaign-demo.yaml")).unwrap();
    let text = src
        .replace("pipeline: campaign-pion.yaml", "pipeline: base.yaml")
        .replace("../demo-data/campaign/", "data/")
        .replace("output: ../runs/campaign-demo", "output: out")
        .replace(
            "      - {label: tmin4, set: [\"spectrum.t_min={from: 4, to: 6}\"]}\n",
            "",
        );
    let path = dir.join("campaign.yaml");
    std::fs::write(&path, text).unwrap();
    path
}

// One ensemble with a broken table: its task fails and says so, the others combine with a
// warning; after the table is repaired only the failed task runs again.
#[test]
fn a_failing_ensemble_is_reported_and_resubmitted_alone() {
    let dir = tempdir();
    let path = copied_campaign(dir.path());
    let bad = dir.path().join("data/a09m250/twopt.csv");
    let good = std::fs::read(&bad).unwrap();
    let mut broken = good.clone();
    broken.extend_from_slice(b"this,is,not,a,row\n");
    std::fs::write(&bad, &broken).unwrap();

    let o = formfactory(dir.path(), &["campaign", "run", "campaign.yaml"]);
    assert!(!o.status.success(), "a failed task fails the command");
    assert!(
        stdout(&o).contains("4 runs: 3 computed, 0 up to date, 1 failed"),
        "{}",
        stdout(&o)
    );
    let st = stdout(&formfactory(
        dir.path(),
        &["campaign", "status", "campaign.yaml"],
    ));
    assert!(st.contains("3 done, 1 failed"), "{st}");
    let failed_line = st.lines().find(|l| l.contains("a09m250")).unwrap();
    assert!(
        failed_line.contains("failed") && failed_line.contains("twopt.csv"),
        "{failed_line}"
    );

    let c = campaign::load(&path).unwrap();
    let comb = combine::combine(&c).unwrap();
    assert!(
        comb.warnings
            .iter()
            .any(|w| w.contains("a09m250/tmin3 is failed")),
        "{:?}",
        comb.warnings
    );
    assert_eq!(comb.quantities[0].fits[0].points.len(), 3);
    assert!(
        comb.quantities[0].physical().is_some(),
        "three ensembles still fit three parameters"
    );
    let o = formfactory(dir.path(), &["campaign", "combine", "campaign.yaml"]);
    assert!(
        o.status.success()
            && crate::common::stderr(&o).contains("warning: run a09m250/tmin3 is failed")
    );

    // the Slurm resubmission picks exactly the failed task
    let o = formfactory(
        dir.path(),
        &["campaign", "slurm", "campaign.yaml", "--failed"],
    );
    assert!(stdout(&o).contains("(1 array tasks)"), "{}", stdout(&o));
    let script = std::fs::read_to_string(dir.path().join("out/slurm/demo-failed.sbatch")).unwrap();
    assert!(script.contains("#SBATCH --array=2\n"), "{script}");

    std::fs::write(&bad, &good).unwrap();
    let o = formfactory(dir.path(), &["campaign", "run", "campaign.yaml"]);
    assert!(o.status.success());
    assert!(
        stdout(&o).contains("4 runs: 1 computed, 3 up to date, 0 failed"),
        "{}",
        stdout(&o)
    );
    let st = stdout(&formfactory(
        dir.path(),
        &["campaign", "status", "campaign.yaml"],
    ));
    assert!(st.contains("4 done"), "{st}");

    // a changed input makes its task stale
    let three = dir.path().join("data/a06m300/threept.csv");
    let mut changed = std::fs::read(&three).unwrap();
    changed.extend_from_slice(b"\n");
    std::fs::write(&three, changed).unwrap();
    let st = stdout(&formfactory(
        dir.path(),
        &["campaign", "status", "campaign.yaml"],
    ));
    assert!(
        st.contains("3 done, 1 stale") && st.contains("threept.csv"),
        "{st}"
    );
}

// Coverage of the combined radius over independent noise: the demo ensembles regenerated with
// twelve other seeds, one variant each. Counts within 1 and 2 sigma must stay out of the lower
// 1 % binomial tails (p = 0.683 and 0.954, n = 12: at least 5 and 9), no pull beyond 4 sigma.
#[test]
fn combined_radius_covers_the_truth_over_seeds() {
    let dir = tempdir();
    let root = repo_root();
    let mut pulls = Vec::new();
    for k in 1..=12u64 {
        let case = dir.path().join(format!("seed{k}"));
        let path = copied_campaign(&case);
        for name in DEMO {
            let text =
                std::fs::read_to_string(root.join(format!("demo-data/campaign/{name}.mock.yaml")))
                    .unwrap();
            let seed_line = text.lines().find(|l| l.starts_with("seed: ")).unwrap();
            let seed: u64 = seed_line[6..].trim().parse().unwrap();
            let spec = case.join(format!("{name}.mock.yaml"));
            std::fs::write(
                &spec,
                text.replace(seed_line, &format!("seed: {}", seed + 7919 * k)),
            )
            .unwrap();
            let data = case.join("data").join(name);
            std::fs::remove_dir_all(&data).unwrap();
            formfactory::mock::generate_from_file(&spec, &data, false).expect("generates");
        }
        let c = campaign::load(&path).unwrap();
        let s = local::run_all(&c, &expand::tasks(&c), 2, false).unwrap();
        assert!(s.failed.is_empty(), "seed {k}: {:?}", s.failed);
        let comb = combine::combine(&c).unwrap();
        let (v, stat, _) = comb.quantities[0].physical().expect("a result");
        pulls.push((v - 0.42) / stat);
    }
    println!("pulls of r² at the physical point: {pulls:.2?}");
    let within = |n: f64| pulls.iter().filter(|p| p.abs() < n).count();
    assert!(within(1.0) >= 5 && within(2.0) >= 9, "{pulls:?}");
    assert!(pulls.iter().all(|p| p.abs() < 4.0), "{pulls:?}");
}

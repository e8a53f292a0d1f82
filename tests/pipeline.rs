//! Integration tests: pipeline — parsing, validation messages, the schema.

use crate::common::{fixture, repo_root, tempdir};
use formfactory::pipeline;
use std::path::{Path, PathBuf};

/// The fixture pipeline with `edit` applied to its text, written beside copies of its data.
fn edited(dir: &Path, edit: impl Fn(&str) -> String) -> PathBuf {
    let text = std::fs::read_to_string(fixture("pipeline/minimal.yaml")).unwrap();
    for f in ["twopt.csv", "threept.csv"] {
        std::fs::copy(fixture(&format!("pipeline/{f}")), dir.join(f)).unwrap();
    }
    let p = dir.join("p.yaml");
    std::fs::write(&p, edit(&text)).unwrap();
    p
}

fn load_err(path: &Path, sets: &[&str]) -> String {
    let sets: Vec<String> = sets.iter().map(|s| s.to_string()).collect();
    match pipeline::load(path, &sets) {
        Ok(_) => panic!("{} should be refused", path.display()),
        Err(e) => e.to_string(),
    }
}

#[test]
fn committed_schema_is_current() {
    let committed = std::fs::read_to_string(repo_root().join("schemas/pipeline.schema.json"))
        .expect("schemas/pipeline.schema.json exists");
    assert!(
        committed == pipeline::schema_json(),
        "schemas/pipeline.schema.json is stale: regenerate with `cargo run -- schema > schemas/pipeline.schema.json`"
    );
}

#[test]
fn fixture_pipeline_loads_with_defaults_and_overrides() {
    let plan = pipeline::load(&fixture("pipeline/minimal.yaml"), &[]).unwrap();
    assert_eq!(plan.spec.ensemble.t, 16);
    assert_eq!(
        plan.spec.resampling.samples, 200,
        "default bootstrap samples"
    );
    assert!(plan.out_dir.ends_with("pipeline/run"));
    let sets = vec![
        "resampling.method=bootstrap".to_string(),
        "resampling.samples=50".to_string(),
        "stop_after=spectrum".to_string(),
        "ratio.tsep=[4, 6, 8]".to_string(),
    ];
    let plan = pipeline::load(&fixture("pipeline/minimal.yaml"), &sets).unwrap();
    assert_eq!(plan.spec.resampling.samples, 50);
    assert_eq!(plan.spec.ratio.tsep, Some(vec![4, 6, 8]));
    assert_eq!(plan.last_stage, pipeline::spec::Stage::Spectrum);
}

#[test]
fn misspelt_key_names_line_column_and_near_miss() {
    let dir = tempdir();
    let p = edited(dir.path(), |t| {
        t.replace("  tau_cut: 1\n", "  tau_cutt: 1\n")
    });
    let e = load_err(&p, &[]);
    // `tau_cutt` is on line 24, indented by two spaces
    assert!(e.contains("p.yaml:24:3"), "{e}");
    assert!(
        e.contains("unknown key `tau_cutt` in `excited_states`"),
        "{e}"
    );
    assert!(e.contains("did you mean `tau_cut`?"), "{e}");
}

#[test]
fn misspelt_value_suggests_valid_one() {
    let dir = tempdir();
    let p = edited(dir.path(), |t| {
        t.replace("method: jackknife", "method: jacknife")
    });
    let e = load_err(&p, &[]);
    assert!(e.contains("p.yaml:14:"), "{e}");
    assert!(e.contains("did you mean `jackknife`?"), "{e}");
}

#[test]
fn set_with_unknown_path_is_refused_with_suggestion() {
    let e = load_err(&fixture("pipeline/minimal.yaml"), &["resampling.sample=5"]);
    assert!(e.contains("--set resampling.sample=5"), "{e}");
    assert!(e.contains("did you mean `samples`?"), "{e}");
    let e = load_err(
        &fixture("pipeline/minimal.yaml"),
        &["resampling.bin_size=0"],
    );
    assert!(
        e.contains("--set resampling.bin_size=0") && e.contains("bin_size 0"),
        "{e}"
    );
}

#[test]
fn out_of_range_values_quote_their_key() {
    let dir = tempdir();
    let p = edited(dir.path(), |t| {
        t.replace("{from: 2, to: 4}", "{from: 2, to: 9}")
    });
    let e = load_err(&p, &[]);
    assert!(
        e.contains("p.yaml:18:3") && e.contains("t_max = 8 must be above the largest t_min (9)"),
        "{e}"
    );
    let p = edited(dir.path(), |t| t.replace("tsep: [4, 6]", "tsep: [2, 6]"));
    let e = load_err(&p, &[]);
    assert!(
        e.contains("p.yaml:21:10") && e.contains("tau_cut < tsep/2"),
        "{e}"
    );
    let p = edited(dir.path(), |t| t.replace("GE: [", "GX: ["));
    let e = load_err(&p, &[]);
    assert!(
        e.contains("p.yaml:28:5") && e.contains("did you mean `GE`?"),
        "{e}"
    );
}

#[test]
fn wrong_type_and_missing_file_are_reported() {
    let dir = tempdir();
    let p = edited(dir.path(), |t| t.replace("  L: 8\n", "  L: eight\n"));
    let e = load_err(&p, &[]);
    assert!(e.contains("p.yaml:5:") && e.contains("ensemble.L"), "{e}");
    let p = edited(dir.path(), |t| {
        t.replace("twopt: twopt.csv", "twopt: nowhere.csv")
    });
    let e = load_err(&p, &[]);
    assert!(
        e.contains("p.yaml:11:3") && e.contains("nowhere.csv") && e.contains("does not exist"),
        "{e}"
    );
}

#[test]
fn typos_inside_embedded_stage_settings_are_found() {
    let dir = tempdir();
    // a misspelt key two levels inside the ratio stage's settings, in the map form of the schema
    let p = edited(dir.path(), |t| {
        t.replace(
            "  tau_cut: 1\n",
            "  tau_cut: 1\n  two_state: {floating_gaps: {prior_width_factr: 2}}\n",
        )
    });
    let e = load_err(&p, &[]);
    assert!(e.contains("p.yaml:25:31"), "{e}");
    assert!(e.contains("did you mean `prior_width_factor`?"), "{e}");
    // the correct spelling in map form is accepted
    let p = edited(dir.path(), |t| {
        t.replace(
            "  tau_cut: 1\n",
            "  tau_cut: 1\n  two_state: {floating_gaps: {prior_width_factor: 2}}\n",
        )
    });
    let plan = pipeline::load(&p, &[]).unwrap();
    assert_eq!(
        plan.spec.excited_states.fits.two_state,
        formfactory::ratio::TwoStateVariant::FloatingGaps {
            prior_width_factor: 2.0
        }
    );
    // a wrong type inside the embedded settings names the key, not just the section
    let e = load_err(
        &fixture("pipeline/minimal.yaml"),
        &["excited_states.tau_cut=x"],
    );
    assert!(e.contains("`excited_states.tau_cut`: invalid type"), "{e}");
    let e = load_err(
        &fixture("pipeline/minimal.yaml"),
        &["decomposition.weight=full"],
    );
    assert!(e.contains("did you mean `weights`?"), "{e}");
}

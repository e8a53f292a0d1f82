//! Data rules that need the values: `ensemble.T` against the data (or taken from it), channels
//! that never fluctuate, values out of double precision's range, too few configurations, and
//! configurations dropped by `keep_common_configs` listed in the warnings and the manifest.
//! On a copy of the smallest campaign demo ensemble (a12m350: 48 configurations, T = 24).

use crate::common::{formfactory, repo_root, stderr, stdout, tempdir};
use std::path::Path;

/// Copy the ensemble's tables into `dir` (each line passed through `edit_two`/`edit_three`)
/// and write `p.yaml`, the campaign base pipeline reading them, with `edit_yaml` applied.
fn setup(
    dir: &Path,
    edit_two: impl Fn(&str) -> Option<String>,
    edit_three: impl Fn(&str) -> Option<String>,
    edit_yaml: impl Fn(&str) -> String,
) {
    let data = repo_root().join("demo-data/campaign/a12m350");
    for (name, edit) in [
        ("twopt.csv", &edit_two as &dyn Fn(&str) -> Option<String>),
        ("threept.csv", &edit_three),
    ] {
        let text = std::fs::read_to_string(data.join(name)).expect("demo table");
        let mut lines = text.lines();
        let mut out = format!("{}\n", lines.next().expect("header"));
        for l in lines {
            if let Some(l) = edit(l) {
                out.push_str(&l);
                out.push('\n');
            }
        }
        std::fs::write(dir.join(name), out).expect("write table");
    }
    let yaml = std::fs::read_to_string(repo_root().join("pipelines/campaign-pion.yaml"))
        .expect("pipeline")
        .replace("../demo-data/campaign/a12m350/", "")
        .replace("../runs/campaign-pion", "run");
    std::fs::write(dir.join("p.yaml"), edit_yaml(&yaml)).expect("write pipeline");
}

fn same(l: &str) -> Option<String> {
    Some(l.to_string())
}

/// The configuration number of a data row.
fn config(l: &str) -> i64 {
    l.split(',')
        .next()
        .and_then(|c| c.parse().ok())
        .expect("config column")
}

/// A row with its last two fields (re, im) replaced.
fn with_values(l: &str, re: &str, im: &str) -> String {
    let f: Vec<&str> = l.split(',').collect();
    format!("{},{re},{im}", f[..f.len() - 2].join(","))
}

/// A row with its values multiplied by `k` (as text: `k` is applied by exponent shift).
fn scaled(l: &str, k: f64) -> String {
    let f: Vec<&str> = l.split(',').collect();
    let n = f.len();
    let v = |s: &str| s.parse::<f64>().expect("value") * k;
    format!(
        "{},{:e},{:e}",
        f[..n - 2].join(","),
        v(f[n - 2]),
        v(f[n - 1])
    )
}

fn check(dir: &Path) -> (bool, String) {
    let o = formfactory(dir, &["check", "p.yaml"]);
    (o.status.success(), format!("{}{}", stdout(&o), stderr(&o)))
}

#[test]
fn time_extent_is_checked_or_taken_from_the_data() {
    let dir = tempdir();
    setup(dir.path(), same, same, |y| {
        y.replace("  T: 24\n", "  T: 30\n")
    });
    let (ok, out) = check(dir.path());
    assert!(!ok, "{out}");
    assert!(
        out.contains("ensemble.T")
            && out.contains("T = 30 does not match")
            && out.contains("T = 24"),
        "{out}"
    );
    // omitted: taken from the data, and the run reports the lattice from the data
    setup(dir.path(), same, same, |y| y.replace("  T: 24\n", ""));
    let (ok, out) = check(dir.path());
    assert!(ok, "{out}");
}

#[test]
fn a_three_point_channel_of_zeros_is_refused_by_name() {
    let dir = tempdir();
    // every row of the tsep = 10 channel at q = 0 becomes exactly zero
    let zero = |l: &str| {
        let f: Vec<&str> = l.split(',').collect();
        if f[1] == "10" && f[6..9] == ["0", "0", "0"] {
            Some(with_values(l, "0", "0"))
        } else {
            Some(l.to_string())
        }
    };
    setup(dir.path(), same, zero, |y| y.to_string());
    let (ok, out) = check(dir.path());
    assert!(!ok, "{out}");
    assert!(out.contains("threept.csv"), "{out}");
    assert!(
        out.contains("three-point channel") && out.contains("tsep 10"),
        "{out}"
    );
    assert!(
        out.contains("every value is zero") && out.contains("48 configurations"),
        "{out}"
    );
}

#[test]
fn values_whose_squares_underflow_are_refused_with_the_reason() {
    let dir = tempdir();
    setup(
        dir.path(),
        |l| Some(scaled(l, 1e-300)),
        |l| Some(scaled(l, 1e-300)),
        |y| y.to_string(),
    );
    let (ok, out) = check(dir.path());
    assert!(!ok, "{out}");
    assert!(
        out.contains("twopt.csv") && out.contains("underflow"),
        "{out}"
    );
    assert!(!out.contains("zero variance"), "{out}");
    // a common factor that keeps the values representable is fine
    setup(
        dir.path(),
        |l| Some(scaled(l, 1e-40)),
        |l| Some(scaled(l, 1e-40)),
        |y| y.to_string(),
    );
    let (ok, out) = check(dir.path());
    assert!(ok, "{out}");
}

#[test]
fn one_configuration_says_what_resampling_needs() {
    let dir = tempdir();
    let first = |l: &str| (config(l) == 1).then(|| l.to_string());
    setup(dir.path(), first, first, |y| {
        y.replace("bin_size: 2", "bin_size: 1")
    });
    let (ok, out) = check(dir.path());
    assert!(!ok, "{out}");
    assert!(
        out.contains("1 configuration(s)") && out.contains("at least 2"),
        "{out}"
    );
    assert!(!out.contains("at most 0"), "{out}");
}

#[test]
fn configurations_dropped_for_the_other_table_are_listed_and_recorded() {
    let dir = tempdir();
    // configuration 7 only in the two-point table, 40 only in the three-point table
    setup(
        dir.path(),
        |l| (config(l) != 40).then(|| l.to_string()),
        |l| (config(l) != 7).then(|| l.to_string()),
        |y| {
            y.replace(
                "  threept: threept.csv",
                "  threept: threept.csv\n  keep_common_configs: true",
            )
            .replace("bin_size: 2", "bin_size: 4")
        },
    );
    let o = formfactory(
        dir.path(),
        &["run", "p.yaml", "--set", "stop_after=spectrum"],
    );
    let out = format!("{}{}", stdout(&o), stderr(&o));
    assert!(o.status.success(), "{out}");
    // 46 configurations in bins of 4: the last two (47, 48) do not fill a bin
    assert!(
        out.contains(
            "data: 46 configurations in 11 bins, 11 resamples; dropped 2 not in both tables \
             (7, 40); dropped 2 in an incomplete last bin (47, 48)"
        ),
        "{out}"
    );
    let manifest: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(dir.path().join("run/manifest.json")).expect("manifest"),
    )
    .expect("manifest JSON");
    let dropped = &manifest["data"]["dropped_configurations"];
    assert_eq!(
        dropped["not_in_both_tables"],
        serde_json::json!([7, 40]),
        "{manifest}"
    );
    assert_eq!(
        dropped["incomplete_last_bin"],
        serde_json::json!([47, 48]),
        "{manifest}"
    );
    assert_eq!(manifest["data"]["configurations"], 46);
    assert_eq!(manifest["data"]["bins"], 11);
    let warnings = manifest["warnings"].to_string();
    assert!(
        warnings.contains("kept the 46 configurations common to both tables and dropped 2: 7, 40")
            && warnings.contains("binning by 4 dropped the last 2 configuration(s): 47, 48"),
        "{warnings}"
    );
}

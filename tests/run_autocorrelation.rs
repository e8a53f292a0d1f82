//! Issue 10 case 8: every run reports the integrated autocorrelation time and a binning
//! study of representative data points, and warns when the bins are shorter than about
//! 2 tau_int. Checked on a mock whose noise is AR(1) in configuration order with rho = 0.6:
//! its integrated autocorrelation time is (1 + rho) / (2 (1 - rho)) = 2.0 (analytic result
//! for AR(1), e.g. Madras and Sokal, J. Stat. Phys. 50 (1988) 109, from memory), and the
//! error of a mean rises with the bin size towards sqrt(2 tau_int) = 2 times the naive one.
//! With bins of one configuration the run also measures tau_int of the binned data (pooled
//! over every time series) and, under `autocorrelation_inflation: auto` (and the default `always`), inflates
//! every resampled deviation by sqrt(2 tau_int), about 2.

use crate::common::{fixture, formfactory, stderr, tempdir};
use crate::pipeline::read_rows;
use std::collections::BTreeMap;
use std::path::Path;

const PIPELINE: &str = "ensemble:
  label: autocorrelated
  L: 8
  T: 16
  spacing_fm: 0.12
  pion_mass: 0.3
  hadron: spin0
data:
  twopt: data/twopt.csv
  threept: data/threept.csv
resampling:
  method: jackknife
  bin_size: 1
spectrum:
  t_min: {from: 2, to: 3}
  t_max: 7
  n_states: {from: 1, to: 1}
ratio:
  tsep: [6]
excited_states:
  methods: [plateau]
  tau_cut: 1
  final_method: plateau
stop_after: spectrum
output:
  dir: run
";

fn number(row: &BTreeMap<String, String>, column: &str) -> f64 {
    row[column]
        .parse()
        .unwrap_or_else(|_| panic!("{column}: {:?}", row[column]))
}

fn warnings(run: &Path) -> Vec<String> {
    let manifest: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(run.join("manifest.json")).unwrap()).unwrap();
    manifest["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| w.as_str().unwrap().to_string())
        .collect()
}

#[test]
fn a_run_measures_tau_int_studies_binning_and_warns_when_bins_are_short() {
    let dir = tempdir();
    std::fs::copy(
        fixture("mock/autocorrelated.yaml"),
        dir.path().join("m.yaml"),
    )
    .unwrap();
    let o = formfactory(dir.path(), &["mock", "m.yaml", "--out", "data"]);
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::write(dir.path().join("p.yaml"), PIPELINE).unwrap();

    // bins of one configuration: too short for tau_int = 2
    let o = formfactory(dir.path(), &["run", "p.yaml", "--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let run = dir.path().join("run");
    let (table, binned) = autocorrelation_rows(&run);
    assert_eq!(
        table.len(),
        4,
        "three two-point times and one three-point point"
    );
    // The binned data (bins of 1) carry the whole tau_int = 2.0; pooled over every time
    // series the estimate is far better than one chain's (0.3 allowed, against a one-chain
    // error of about 0.5 at 400 values).
    assert_eq!(binned.len(), 2, "one row per table");
    for r in &binned {
        let tau = number(r, "tau_int");
        assert!((tau - 2.0).abs() < 0.3, "{}: tau_int {tau}", r["point"]);
        assert_eq!(r["bins_long_enough"], "no");
        assert!(r["note"].contains("inflated by"), "{}", r["note"]);
    }
    for r in &table {
        let (tau, err) = (number(r, "tau_int"), number(r, "tau_int_error"));
        assert!(
            (tau - 2.0).abs() < 3.0 * err && err < 0.8,
            "{}: tau_int {tau} +- {err}, analytic 2.0",
            r["point"]
        );
        assert_eq!(r["bins_long_enough"], "no", "{}", r["point"]);
        // the Gamma-method error exceeds the naive one by about sqrt(2 tau_int) = 2
        let ratio = number(r, "gamma_sigma") / number(r, "naive_sigma");
        assert!((1.5..2.6).contains(&ratio), "{}: {ratio}", r["point"]);
    }
    let study = read_rows(&run.join("binning_study.csv"));
    assert_eq!(study.len(), 4 * 50, "bins of 1 to n/8 = 50 for every point");
    // AR(1), bins of 20: the variance ratio to unbinned is
    // (1 + rho)/(1 - rho) - 2 rho (1 - rho^b) / (b (1 - rho)^2) = 3.63 (analytic), an error
    // ratio of 1.90; with 20 bins each value is uncertain by about 16 %
    let at_20: Vec<f64> = study
        .iter()
        .filter(|r| r["bin_size"] == "20")
        .map(|r| {
            assert_eq!(r["n_bins"], "20");
            number(r, "ratio_to_unbinned")
        })
        .collect();
    assert_eq!(at_20.len(), 4);
    assert!(at_20.iter().all(|r| (1.2..2.9).contains(r)), "{at_20:?}");
    let mean = at_20.iter().sum::<f64>() / 4.0;
    assert!((1.5..2.4).contains(&mean), "{at_20:?}");
    let w = warnings(&run);
    let said: Vec<&String> = w
        .iter()
        .filter(|w| w.starts_with("autocorrelation:"))
        .collect();
    assert_eq!(said.len(), 2, "the bins, the inflation: {w:?}");
    assert!(
        said[0].contains("bins of 1 configuration(s) are shorter than 2 tau_int at 4 of 4")
            && said[0].contains("resampling.bin_size"),
        "{}",
        said[0]
    );
    assert!(
        said[1].contains("inflated by sqrt(2 tau_int)"),
        "{}",
        said[1]
    );
    let page = std::fs::read_to_string(run.join("report.html")).unwrap();
    assert!(page.contains("Autocorrelation") && page.contains("binning study"));
    // the binning study's figure: one series of points per representative point
    let svg = std::fs::read_to_string(run.join("plots/binning-study.svg")).unwrap();
    for r in &table {
        assert!(
            svg.contains(&r["point"]),
            "{} not in the figure",
            r["point"]
        );
    }

    // bins of eight configurations span 4 tau_int: no warning (under `auto`; the default
    // `always` would inflate by the small measured excess)
    let o = formfactory(
        dir.path(),
        &[
            "run",
            "p.yaml",
            "--quiet",
            "--force",
            "--set",
            "resampling.bin_size=8",
            "--set",
            "resampling.autocorrelation_inflation=auto",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    // No warning about short bins and nothing inflated: bins of 8 keep tau_int = 1/(2 * 8)
    // * (1 + rho)/(1 - rho) / v_8 = 0.65 (AR(1), v_b = (b + 2 sum_{k<b} (b - k) rho^k) / b^2
    // = 0.385 the variance of a bin relative to one value; analytic), which 50 bins cannot
    // tell from 1/2 (one-chain error about 0.3), so `auto` only mentions it.
    let w = warnings(&run);
    assert!(
        !w.iter()
            .any(|w| w.contains("shorter than 2 tau_int") || w.contains("inflated by")),
        "{w:?}"
    );
    let (table, binned) = autocorrelation_rows(&run);
    for r in &table {
        assert_eq!(r["bins_long_enough"], "yes", "{}", r["point"]);
        assert_eq!(r["bin_size"], "8");
        assert!(number(r, "binned_sigma") > 1.4 * number(r, "naive_sigma"));
    }
    for r in &binned {
        let (tau, err) = (number(r, "tau_int"), number(r, "tau_int_error"));
        assert!((tau - 0.65).abs() < err, "{}: {tau} +- {err}", r["point"]);
        assert!(!r["note"].contains("inflated"), "{}", r["note"]);
    }
}

// The inflation reaches every error: the ground energy's jackknife error of the bins-of-1
// run under `auto` is sqrt(2 tau_int) times that of the same run with
// `autocorrelation_inflation: never` (identity for a quantity linear in the data; the fit is
// non-linear, but with 2 % noise its second-order terms are of order 1e-3 relative, so 1 %
// is allowed).
#[test]
fn inflation_scales_the_errors_of_a_run() {
    let dir = tempdir();
    std::fs::copy(
        fixture("mock/autocorrelated.yaml"),
        dir.path().join("m.yaml"),
    )
    .unwrap();
    let o = formfactory(dir.path(), &["mock", "m.yaml", "--out", "data"]);
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::write(dir.path().join("p.yaml"), PIPELINE).unwrap();
    let mut errors = Vec::new();
    for (mode, out) in [("auto", "run_auto"), ("never", "run_never")] {
        let set = format!("resampling.autocorrelation_inflation={mode}");
        let o = formfactory(
            dir.path(),
            &["run", "p.yaml", "--quiet", "--out", out, "--set", &set],
        );
        assert!(o.status.success(), "{}", stderr(&o));
        let spectrum = read_rows(&dir.path().join(out).join("spectrum.csv"));
        let ground = spectrum
            .iter()
            .find(|r| r["state"] == "0" && r["px"] == "0" && r["py"] == "0" && r["pz"] == "0")
            .expect("ground state at rest");
        errors.push(number(ground, "error"));
        if mode == "never" {
            let w = warnings(&dir.path().join(out));
            assert!(
                w.iter().any(|w| w.contains("errors are short by about")),
                "{w:?}"
            );
        }
    }
    let (_, binned) = autocorrelation_rows(&dir.path().join("run_auto"));
    let two = binned
        .iter()
        .find(|r| r["point"] == "binned two-point data")
        .expect("two-point row");
    let three = binned
        .iter()
        .find(|r| r["point"] == "binned three-point data")
        .expect("three-point row");
    let tau = number(two, "tau_int").max(number(three, "tau_int"));
    let ratio = errors[0] / errors[1];
    assert!(
        (ratio / (2.0 * tau).sqrt() - 1.0).abs() < 0.01,
        "error ratio {ratio}, sqrt(2 tau_int) = {}",
        (2.0 * tau).sqrt()
    );
}

/// The representative points' rows of `autocorrelation.csv`, and the binned tables' rows.
type Rows = Vec<BTreeMap<String, String>>;
fn autocorrelation_rows(run: &Path) -> (Rows, Rows) {
    read_rows(&run.join("autocorrelation.csv"))
        .into_iter()
        .partition(|r| !r["point"].starts_with("binned"))
}

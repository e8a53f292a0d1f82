//! Issue 10 case 8: every run reports the integrated autocorrelation time and a binning
//! study of representative data points, and warns when the bins are shorter than about
//! 2 tau_int. Checked on a mock whose noise is AR(1) in configuration order with rho = 0.6:
//! its integrated autocorrelation time is (1 + rho) / (2 (1 - rho)) = 2.0 (analytic result
//! for AR(1), e.g. Madras and Sokal, J. Stat. Phys. 50 (1988) 109, from memory), and the
//! error of a mean rises with the bin size towards sqrt(2 tau_int) = 2 times the naive one.

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
    let table = read_rows(&run.join("autocorrelation.csv"));
    assert_eq!(
        table.len(),
        4,
        "three two-point times and one three-point point"
    );
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
    assert_eq!(said.len(), 1, "said once: {w:?}");
    assert!(
        said[0].contains("bins of 1 configuration(s) are shorter than 2 tau_int at 4 of 4")
            && said[0].contains("resampling.bin_size"),
        "{}",
        said[0]
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

    // bins of eight configurations span 4 tau_int: no warning
    let o = formfactory(
        dir.path(),
        &[
            "run",
            "p.yaml",
            "--quiet",
            "--force",
            "--set",
            "resampling.bin_size=8",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(
        !warnings(&run)
            .iter()
            .any(|w| w.starts_with("autocorrelation:")),
        "{:?}",
        warnings(&run)
    );
    for r in read_rows(&run.join("autocorrelation.csv")) {
        assert_eq!(r["bins_long_enough"], "yes", "{}", r["point"]);
        assert_eq!(r["bin_size"], "8");
        assert!(number(&r, "binned_sigma") > 1.4 * number(&r, "naive_sigma"));
    }
}

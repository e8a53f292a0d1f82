//! Closure of the spectrum stage on small, hard mock ensembles (issue 10): 50 configurations,
//! a strongly coupled excited state, three states, a heavy pion, a spin-0 hadron with
//! autocorrelation. The specs are in `tests/fixtures/spectrum_closure/`; their truth is the
//! generator's (`mock::Truth`), the only source of truth here.
//!
//! An honest analysis puts 68.3 % of the ground-state energies within 1 sigma and 95.4 %
//! within 2 sigma of the truth (normal distribution), and the root-mean-square pull is 1.
//! Issue 10 asks for at least 85 % within 2 sigma and a pull rms of at most 1.15 over
//! several seeds. [`fast_closure_on_a_hard_mock`] checks one seed of the three-state mock in the
//! default suite (binomial bounds, as `tests/closure.rs`); [`closure_study`] (ignored,
//! about 15 s in release) runs every mock over ten seeds and prints the table that the
//! docs quote (`cargo test --release --test tests -- --ignored closure_study --nocapture`).

use crate::common::fixture;
use formfactory::mock::{generate, MockSpec};
use formfactory::resample::binning::bin_twopt;
use formfactory::resample::ResamplePlan;
use formfactory::spectrum::{self, IntRange, SpectrumSettings};

/// One mock of the study and the settings an analyst would give it.
struct Case {
    /// Spec file in `tests/fixtures/spectrum_closure/`.
    file: &'static str,
    /// Bin size (2 for the autocorrelated ensemble: tau_int = 0.93).
    bin: usize,
    /// Largest `t_max` (the stage lowers it per momentum where the signal dies).
    t_max: usize,
}

const CASES: [Case; 4] = [
    Case {
        file: "strong_excited.yaml",
        bin: 1,
        t_max: 16,
    },
    Case {
        file: "three_states.yaml",
        bin: 1,
        t_max: 16,
    },
    Case {
        file: "heavy_pion.yaml",
        bin: 1,
        t_max: 16,
    },
    Case {
        file: "spin0_autocorrelated.yaml",
        bin: 2,
        t_max: 22,
    },
];

fn load(file: &str, seed: u64) -> MockSpec {
    let path = fixture(&format!("spectrum_closure/{file}"));
    let text = std::fs::read_to_string(&path).expect("fixture exists");
    let mut spec = MockSpec::from_yaml(&text, file).expect("fixture spec is valid");
    spec.seed = seed;
    spec
}

/// What one seed of one mock gave.
#[derive(Default)]
struct Outcome {
    /// Pull `(E0 - truth) / sigma` of every momentum kept.
    pulls: Vec<f64>,
    /// `|n|^2` of each pull's momentum.
    n2: Vec<i32>,
    /// Momenta dropped by the stage (not in `pulls`).
    dropped: usize,
}

/// Generate, bin, jackknife and fit one mock; pulls of every ground-state energy.
fn run_case(case: &Case, seed: u64, verbose: bool) -> Outcome {
    let spec = load(case.file, seed);
    let e = generate(&spec).expect("mock generation");
    let (c2, report) = bin_twopt(&e.twopt, case.bin).expect("binning");
    let plan = ResamplePlan::jackknife(report.n_bins);
    let settings = SpectrumSettings {
        t_min: IntRange { from: 2, to: 8 },
        t_max: Some(case.t_max),
        n_states: IntRange { from: 1, to: 2 },
        l_extent: Some(spec.ensemble.l),
        ..SpectrumSettings::default()
    };
    let r = spectrum::run(&c2, &plan, &settings).expect("the spectrum stage runs");
    let mut out = Outcome {
        dropped: r.dropped.len(),
        ..Outcome::default()
    };
    for (p, s) in &r.per_momentum {
        let truth = e.truth.levels(*p).expect("truth").energies[0];
        let g = s.ground_energy();
        let pull = (g.central - truth) / g.error();
        if verbose && pull.abs() > 2.0 {
            println!(
                "  {} seed {seed} {p:?}: E0 = {g} truth {truth:.4} pull {pull:+.2}",
                case.file
            );
            for row in &s.average.table {
                println!(
                    "    t {}..{} n {} chi2/dof {:.2} w {:.3} E {:.4}({:.4}) {}",
                    row.t_min,
                    row.t_max,
                    row.n_states,
                    row.chi2 / row.dof.max(1) as f64,
                    row.weight,
                    row.energy,
                    row.energy_error,
                    row.excluded.as_deref().unwrap_or("")
                );
            }
        }
        out.pulls.push(pull);
        out.n2.push(p.iter().map(|x| x * x).sum::<i32>());
    }
    out
}

/// Fractions within 1 and 2 sigma and the rms pull.
fn summary(pulls: &[f64]) -> (f64, f64, f64) {
    let n = pulls.len().max(1) as f64;
    let within = |k: f64| pulls.iter().filter(|p| p.abs() <= k).count() as f64 / n;
    let rms = (pulls.iter().map(|p| p * p).sum::<f64>() / n).sqrt();
    (within(1.0), within(2.0), rms)
}

// One seed of the three-state mock (27 momenta): the counts within 1 and
// 2 sigma must not be in the lower 1 % tail of their binomial distributions (68.3 % and
// 95.4 % per momentum, normal distribution), no pull beyond 4 sigma, none dropped.
#[test]
fn fast_closure_on_a_hard_mock() {
    use statrs::distribution::{Binomial, DiscreteCDF};
    let out = run_case(&CASES[1], 2001, true);
    let n = out.pulls.len();
    assert_eq!((n, out.dropped), (27, 0));
    for (k, p) in [(1.0, 0.6827), (2.0, 0.9545)] {
        let count = out.pulls.iter().filter(|x| x.abs() <= k).count();
        let tail = Binomial::new(p, n as u64)
            .expect("binomial")
            .cdf(count as u64);
        println!("{count}/{n} within {k} sigma, P(X <= {count}) = {tail:.3}");
        assert!(tail > 0.01, "{count} of {n} within {k} sigma");
    }
    let worst = out.pulls.iter().fold(0.0f64, |m, p| m.max(p.abs()));
    assert!(worst <= 4.0, "a pull of {worst:.2}");
}

// The multi-seed study of issue 10: every mock, ten seeds each. Targets: at least 85 % of
// the ground-state energies within 2 sigma and a pull rms of at most 1.15 per mock. Prints one
// row per mock and, below it, the same figures per |n|^2 (where failures concentrate).
#[test]
#[ignore = "closure study, about 15 s in release; run with --ignored --nocapture"]
fn closure_study() {
    let seeds: Vec<u64> = (7000..7010).collect();
    let mut failures = Vec::new();
    println!(
        "| mock | estimates | dropped | within 1 sigma | within 2 sigma | pull rms | mean pull |"
    );
    println!("|---|---|---|---|---|---|---|");
    for case in &CASES {
        let (mut pulls, mut n2s, mut dropped) = (Vec::new(), Vec::new(), 0);
        for &s in &seeds {
            let out = run_case(case, s, false);
            pulls.extend(out.pulls);
            n2s.extend(out.n2);
            dropped += out.dropped;
        }
        let row = |label: &str, pulls: &[f64], dropped: String| {
            let (w1, w2, rms) = summary(pulls);
            let mean = pulls.iter().sum::<f64>() / pulls.len().max(1) as f64;
            println!(
                "| {label} | {} | {dropped} | {:.1} % | {:.1} % | {rms:.2} | {mean:+.2} |",
                pulls.len(),
                100.0 * w1,
                100.0 * w2
            );
            (w2, rms)
        };
        let (w2, rms) = row(case.file, &pulls, dropped.to_string());
        for k in 0..4 {
            let sel: Vec<f64> = pulls
                .iter()
                .zip(&n2s)
                .filter(|(_, n)| **n == k)
                .map(|(p, _)| *p)
                .collect();
            row(&format!("  |n|^2 = {k}"), &sel, String::new());
        }
        if w2 < 0.85 || rms > 1.15 {
            failures.push(case.file);
        }
    }
    assert!(failures.is_empty(), "below the targets: {failures:?}");
}

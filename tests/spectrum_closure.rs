//! Closure of the spectrum stage on small, hard mock ensembles (issue 10): 50 configurations,
//! a strongly coupled excited state, three states, a heavy pion, a spin-0 hadron with
//! autocorrelation. The specs are in `tests/fixtures/spectrum_closure/`; their truth is the
//! generator's (`mock::Truth`), the only source of truth here.
//!
//! An honest analysis puts 68.3 % of the ground-state energies within 1 sigma and 95.4 %
//! within 2 sigma of the truth (normal distribution), and the root-mean-square pull is 1.
//! Issue 10 asks for at least 85 % within 2 sigma and a pull rms of at most 1.15 over
//! several seeds (issue 11 the same pull rms for the spin-0 mock). [`fast_closure_on_a_hard_mock`]
//! checks one seed of the three-state mock in the default suite (binomial bounds, as
//! `tests/closure.rs`); [`few_bins_errors_include_the_weights_noise`] checks the per-resample
//! weights on many tiny ensembles; [`closure_study`] (ignored, about 40 s in release) runs
//! every mock over twenty seeds and prints the table that the docs quote
//! (`cargo test --release --test tests -- --ignored closure_study --nocapture`).

use crate::common::fixture;
use formfactory::data::ThreePointData;
use formfactory::mock::{generate, MockSpec};
use formfactory::resample::binning::bin_twopt;
use formfactory::resample::inflation::{self, Inflation};
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
    /// `resampling.autocorrelation_inflation` of the run.
    inflation: Inflation,
    /// Whether the study holds this case to the targets (the spin-0 mock under `auto` is
    /// shown for comparison: its 25 bins are too few for `auto` to see their autocorrelation).
    held_to_target: bool,
}

const CASES: [Case; 5] = [
    Case {
        file: "strong_excited.yaml",
        bin: 1,
        t_max: 16,
        inflation: Inflation::Auto,
        held_to_target: true,
    },
    Case {
        file: "three_states.yaml",
        bin: 1,
        t_max: 16,
        inflation: Inflation::Auto,
        held_to_target: true,
    },
    Case {
        file: "heavy_pion.yaml",
        bin: 1,
        t_max: 16,
        inflation: Inflation::Auto,
        held_to_target: true,
    },
    Case {
        file: "spin0_autocorrelated.yaml",
        bin: 2,
        t_max: 22,
        inflation: Inflation::Auto,
        held_to_target: false,
    },
    // The same with inflation asked for: with 25 bins the one-chain error of tau_int (about
    // 0.35) hides the autocorrelation left in bins of 2 from `auto`, but an analyst who has
    // seen tau_int = 0.93 of the unbinned data (`formfactory inspect`) knows it is there.
    Case {
        file: "spin0_autocorrelated.yaml",
        bin: 2,
        t_max: 22,
        inflation: Inflation::Always,
        held_to_target: true,
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
    /// The factor the resampled deviations were inflated by for autocorrelation (1: none).
    inflation: f64,
    /// Pull `(gap - truth) / sigma` of the first gap `E1 - E0` the ratio stage takes
    /// ([`spectrum::MomentumSpectrum::gap`]), at every momentum that has one.
    gap_pulls: Vec<f64>,
    /// The same for the gap of the single highest-weight multi-state fit (what the ratio stage
    /// took before the average), for comparison.
    single_fit_gap_pulls: Vec<f64>,
}

/// Generate, bin, jackknife and fit one mock; pulls of every ground-state energy.
fn run_case(case: &Case, seed: u64, verbose: bool) -> Outcome {
    let spec = load(case.file, seed);
    let e = generate(&spec).expect("mock generation");
    let (mut c2, report) = bin_twopt(&e.twopt, case.bin).expect("binning");
    // As the run's data stage: autocorrelation left in the bins, measured on the two-point
    // table, and the deviations inflated for it as the setting says.
    let measured = inflation::measure(&c2, &ThreePointData::default());
    let factor = inflation::decide(&measured, case.inflation, case.bin).factor;
    if let Some(f) = factor {
        inflation::inflate_all(&mut c2, &mut ThreePointData::default(), f);
    }
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
        inflation: factor.unwrap_or(1.0),
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
        let levels = &e.truth.levels(*p).expect("truth").energies;
        let true_gap = levels[1] - levels[0];
        if let Some(gap) = s.gap() {
            out.gap_pulls.push((gap.central - true_gap) / gap.error());
        }
        if let Some(f) = &s.excited {
            let gap = &f.energies[1] - &f.energies[0];
            out.single_fit_gap_pulls
                .push((gap.central - true_gap) / gap.robust_error());
        }
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

// The first gap `E1 - E0` that the two-state ratio fit takes from the spectrum must carry an
// honest error (issue 13). The mock is the heavy-pion study mock's two-point functions (excited
// state 0.24 above the ground state with the same overlap, 50 configurations, rho = 0.3, bins
// of 2 with the autocorrelation inflation: 25 bins) at |n|^2 = 0..3; over 60 seeds the gaps
// within 1 and 2 sigma of the generator's truth must not be in the lower 1 % tail of the
// binomial distribution (68.3 % and 95.4 %, normal distribution) and the pull rms must be at
// most 1.2 (Student t with 24 degrees of freedom gives 1.04; the rest is room for the
// fits' nonlinearity). The gap of the single highest-weight multi-state fit, which the ratio
// stage took before the average, is printed for comparison: it fails both (DEVELOPERS.md,
// closure tests).
#[test]
fn excited_gap_is_covered() {
    use statrs::distribution::{Binomial, DiscreteCDF};
    let case = Case {
        file: "heavy_strong_excited.yaml",
        bin: 2,
        t_max: 14,
        inflation: Inflation::Always,
        held_to_target: true,
    };
    let (mut avg, mut single) = (Vec::new(), Vec::new());
    for seed in 4101..4161 {
        let out = run_case(&case, seed, false);
        avg.extend(out.gap_pulls);
        single.extend(out.single_fit_gap_pulls);
    }
    for (label, pulls) in [("single fit", &single), ("average", &avg)] {
        let (w1, w2, rms) = summary(pulls);
        println!(
            "gap, {label}: {} pulls, within 1 sigma {:.1} %, within 2 sigma {:.1} %, rms {rms:.2}",
            pulls.len(),
            100.0 * w1,
            100.0 * w2
        );
    }
    let n = avg.len();
    assert!(n >= 200, "{n} gaps");
    for (k, p) in [(1.0, 0.6827), (2.0, 0.9545)] {
        let count = avg.iter().filter(|x| x.abs() <= k).count();
        let tail = Binomial::new(p, n as u64)
            .expect("binomial")
            .cdf(count as u64);
        assert!(tail > 0.01, "{count} of {n} gaps within {k} sigma");
    }
    let (_, _, rms) = summary(&avg);
    assert!(rms <= 1.2, "gap pull rms {rms:.2}");
}

// The multi-seed study of issue 10: every mock, twenty seeds each (FF_CLOSURE_SEEDS to
// change). Targets: at least 85 % of the ground-state energies within 2 sigma and a pull rms
// of at most 1.15 per mock held to them. Prints one row per mock and, below it, the same
// figures per |n|^2 (where failures concentrate).
#[test]
#[ignore = "closure study, about 40 s in release; run with --ignored --nocapture"]
fn closure_study() {
    // FF_CLOSURE_SEEDS overrides the number of seeds (20 by default).
    let n_seeds = std::env::var("FF_CLOSURE_SEEDS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(20u64);
    let seeds: Vec<u64> = (7000..7000 + n_seeds).collect();
    let mut failures = Vec::new();
    println!(
        "| mock | inflation | estimates | dropped | within 1 sigma | within 2 sigma | pull rms | mean pull |"
    );
    println!("|---|---|---|---|---|---|---|---|");
    for case in &CASES {
        let (mut pulls, mut n2s, mut dropped, mut factors) =
            (Vec::new(), Vec::new(), 0, Vec::new());
        for &s in &seeds {
            let out = run_case(case, s, false);
            pulls.extend(out.pulls);
            n2s.extend(out.n2);
            dropped += out.dropped;
            factors.push(out.inflation);
        }
        let inflated = factors.iter().filter(|f| **f > 1.0).count();
        let mean_factor = factors.iter().sum::<f64>() / factors.len().max(1) as f64;
        let how = format!(
            "{}: {inflated}/{} seeds, mean factor {mean_factor:.3}",
            case.inflation.name(),
            seeds.len()
        );
        let row = |label: &str, how: &str, pulls: &[f64], dropped: String| {
            let (w1, w2, rms) = summary(pulls);
            let mean = pulls.iter().sum::<f64>() / pulls.len().max(1) as f64;
            println!(
                "| {label} | {how} | {} | {dropped} | {:.1} % | {:.1} % | {rms:.2} | {mean:+.2} |",
                pulls.len(),
                100.0 * w1,
                100.0 * w2
            );
            (w2, rms)
        };
        let (w2, rms) = row(case.file, &how, &pulls, dropped.to_string());
        for k in 0..4 {
            let sel: Vec<f64> = pulls
                .iter()
                .zip(&n2s)
                .filter(|(_, n)| **n == k)
                .map(|(p, _)| *p)
                .collect();
            row(&format!("  |n|^2 = {k}"), "", &sel, String::new());
        }
        if case.held_to_target && (w2 < 0.85 || rms > 1.15) {
            failures.push(case.file);
        }
    }
    assert!(failures.is_empty(), "below the targets: {failures:?}");
}

/// A spin-0 mock of one momentum with few configurations and no autocorrelation.
const FEW_BINS: &str = "
seed: 1
ensemble: {L: 16, T: 32, a_fm: 0.09, configs: 12}
hadron:
  kind: spin0
  dispersion: lattice
  smearing_width: 2.0
  states:
    - {mass: 0.30, overlap: 1.0}
form_factors:
  F: {model: dipole, value_at_zero: 1.0, mass: 0.5}
channels:
  momenta: {sink: [[0, 0, 0]], max_q2: 0, representatives: false}
  tseps: [4]
  insertions:
    - {currents: [V4]}
noise:
  twopt: 0.02
  threept: 0.03
  growth_rate: 0.1
  time_correlation: 2.0
";

// Weights estimated from few bins are noisy, and a fit weighted by them scatters more than
// one with exact weights; a resampled error includes that scatter only when every resample
// weights its points by the errors of its own bins, as the central fit did with all of them.
// Over 150 independent ensembles of 12 configurations (one momentum, one state, diagonal
// weights, jackknife), the pulls of the ground energy against the generator's truth must
// have an rms consistent with 1 (normal distribution: 150 pulls give an rms within 0.85-1.15
// at better than 99 %, from the chi-square distribution with 150 degrees of freedom) with
// the per-resample weights, and frozen weights must give smaller errors on most ensembles
// (the rescaling is what widens them).
#[test]
fn few_bins_errors_include_the_weights_noise() {
    use formfactory::spectrum::{fit_correlator, resample_series};
    let settings = SpectrumSettings {
        t_min: IntRange { from: 2, to: 4 },
        t_max: Some(14),
        n_states: IntRange { from: 1, to: 1 },
        ..SpectrumSettings::default()
    };
    let (mut own, mut frozen, mut wider) = (Vec::new(), Vec::new(), 0);
    let n_ensembles = 150;
    for seed in 0..n_ensembles {
        let mut spec = MockSpec::from_yaml(FEW_BINS, "few bins").expect("valid spec");
        spec.seed = 5000 + seed;
        let e = generate(&spec).expect("mock generation");
        let truth = e.truth.levels([0, 0, 0]).expect("truth").energies[0];
        let series = e.twopt.channels.values().next().expect("one channel");
        let plan = ResamplePlan::jackknife(series.n_cfg);
        let corr = resample_series(series, &plan).expect("resampled");
        let scales: Vec<Vec<f64>> = (0..series.n_t)
            .map(|t| plan.sample_error_scales(series.re_at(t)))
            .collect();
        let fit = |scales: Option<&[Vec<f64>]>| {
            let s = fit_correlator([0, 0, 0], &corr, &corr, scales, &settings, &mut Vec::new())
                .expect("fits");
            s.ground_energy().clone()
        };
        let (a, b) = (fit(Some(&scales)), fit(None));
        own.push((a.central - truth) / a.error());
        frozen.push((b.central - truth) / b.error());
        if a.error() > b.error() {
            wider += 1;
        }
    }
    let rms = |p: &[f64]| (p.iter().map(|x| x * x).sum::<f64>() / p.len() as f64).sqrt();
    println!(
        "pull rms: own weights {:.3}, frozen weights {:.3}; own errors wider on {wider} of {n_ensembles}",
        rms(&own),
        rms(&frozen)
    );
    assert!((0.85..=1.15).contains(&rms(&own)), "rms {}", rms(&own));
    assert!(wider > n_ensembles / 2, "{wider} of {n_ensembles}");
}

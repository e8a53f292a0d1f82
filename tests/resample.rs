//! Integration tests: resample (binning, jackknife / bootstrap, covariance, autocorrelation).
//! Every check names its external source in a comment.

use approx::{assert_abs_diff_eq, assert_relative_eq};
use formfactory::data::{Current, Projector};
use formfactory::data::{Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey};
use formfactory::resample::autocorr::{
    binning_study, gamma_method, pooled_gamma_method, rho, sample_autocorrelation, DEFAULT_S,
};
use formfactory::resample::binning::{bin_series, bin_tables, bin_threept, bin_twopt, bin_values};
use formfactory::resample::covariance::{
    estimate, estimate_with_bins, hartlap_factor, CovarianceKind, CovarianceOptions,
    ShrinkageTarget,
};
use formfactory::resample::inflation::{self, Inflation};
use formfactory::resample::{
    covariance_of, fmt_value_error, Part, ResamplePlan, Resampled, Scheme,
};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::path::PathBuf;

// ---------------------------------------------------------------------------------------
// helpers

fn fixture(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures/resample")
        .join(rel)
}

/// Rows of a small CSV fixture (header skipped), every field parsed as f64.
fn read_csv(rel: &str) -> Vec<Vec<f64>> {
    let text = std::fs::read_to_string(fixture(rel)).expect("fixture exists");
    text.lines()
        .skip(1)
        .filter(|l| !l.trim().is_empty())
        .map(|l| {
            l.split(',')
                .map(|f| f.trim().parse().expect("number"))
                .collect()
        })
        .collect()
}

/// A NIST certified value by name.
fn certified(name: &str, what: &str) -> f64 {
    let text = std::fs::read_to_string(fixture(&format!(
        "nist-strd-univariate/{name}.certified.csv"
    )))
    .expect("fixture exists");
    text.lines()
        .find_map(|l| l.strip_prefix(&format!("{what},")))
        .expect("certified value present")
        .parse()
        .expect("number")
}

/// Standard normal deviate by Box–Muller.
fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.gen::<f64>();
    let u2: f64 = rng.gen();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

fn gaussian(n: usize, seed: u64) -> Vec<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..n).map(|_| normal(&mut rng)).collect()
}

/// AR(1) chain `x_i = rho x_{i-1} + eps_i`, started in equilibrium.
fn ar1(n: usize, rho: f64, seed: u64) -> Vec<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut x = normal(&mut rng) / (1.0 - rho * rho).sqrt();
    (0..n)
        .map(|_| {
            x = rho * x + normal(&mut rng);
            x
        })
        .collect()
}

fn mean_sd(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    let s2 = x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0);
    (m, s2.sqrt())
}

// ---------------------------------------------------------------------------------------
// jackknife and bootstrap

#[test]
fn jackknife_error_of_mean_is_standard_error() {
    // Identity: the jackknife error of the mean equals s / sqrt(N) (Efron & Tibshirani 1993,
    // jackknife chapter; section number from memory: §11.2).
    let x: Vec<f64> = (0..37).map(|i| ((i * 7919) % 101) as f64 * 0.37).collect();
    let (m, s) = mean_sd(&x);
    let r = ResamplePlan::jackknife(x.len()).mean(&x);
    assert_relative_eq!(r.central, m, max_relative = 1e-14);
    assert_relative_eq!(r.error(), s / (x.len() as f64).sqrt(), max_relative = 1e-12);
    // Same identity with a large common offset (the O(N) samples must not cancel).
    let shifted: Vec<f64> = x.iter().map(|v| v + 1e7).collect();
    let r = ResamplePlan::jackknife(x.len()).mean(&shifted);
    assert_relative_eq!(r.error(), s / (x.len() as f64).sqrt(), max_relative = 1e-8);
}

#[test]
fn bootstrap_error_of_mean_approaches_standard_error() {
    // Efron & Tibshirani 1993 (bootstrap chapter): the ideal bootstrap SE of the mean is
    // sqrt((N-1)/N) s/sqrt(N); with B draws the estimate scatters by about 1/sqrt(2B) = 1.6 %
    // for B = 2000, so 5 % is a 3-sigma tolerance.
    let x = gaussian(100, 11);
    let (m, s) = mean_sd(&x);
    let r = ResamplePlan::bootstrap(x.len(), 2000, 42).mean(&x);
    assert_relative_eq!(r.central, m, max_relative = 1e-14);
    assert_eq!(r.len(), 2000);
    assert_relative_eq!(r.error(), s / 10.0, max_relative = 0.05);
    // The bootstrap mean of the sample means is unbiased for the mean: bias within 3 SE/sqrt(B).
    assert_abs_diff_eq!(r.bias(), 0.0, epsilon = 3.0 * r.error() / 2000f64.sqrt());
}

#[test]
fn bootstrap_plan_is_reproducible() {
    let a = ResamplePlan::bootstrap(20, 50, 7);
    let b = ResamplePlan::bootstrap(20, 50, 7);
    assert_eq!(a, b);
    assert_ne!(a, ResamplePlan::bootstrap(20, 50, 8));
    assert_eq!(ResamplePlan::new(Scheme::Bootstrap, 20, 50, 7), a);
    let j = ResamplePlan::new(Scheme::Jackknife, 20, 50, 7);
    assert_eq!(
        (j.scheme(), j.n_bins(), j.n_samples()),
        (Scheme::Jackknife, 20, 20)
    );
    assert_eq!(
        (a.scheme(), a.n_bins(), a.n_samples()),
        (Scheme::Bootstrap, 20, 50)
    );
    // Every bootstrap sample draws exactly N bins (definition of the bootstrap).
    if let ResamplePlan::Bootstrap { counts, .. } = &a {
        for row in counts.chunks(20) {
            assert_eq!(row.iter().sum::<u32>(), 20);
        }
    } else {
        panic!("bootstrap plan expected");
    }
}

fn series_of(n_t: usize, n_cfg: usize, seed: u64) -> Series {
    let mut s = Series::zeros(n_t, n_cfg);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    for v in s.re.iter_mut().chain(s.im.iter_mut()) {
        *v = normal(&mut rng);
    }
    s
}

#[test]
fn bootstrap_and_series_means_identical_for_any_thread_count() {
    // Requirement (BRIEF: results must not depend on the number of rayon threads): build the
    // plan and resample a whole series on 1 and on 2 threads, compare bit for bit.
    let s = series_of(16, 60, 5);
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .expect("thread pool");
        pool.install(|| {
            let plan = ResamplePlan::bootstrap(60, 300, 99);
            let re = plan.means_of_series(&s, Part::Re).expect("matching bins");
            let im = plan.means_of_series(&s, Part::Im).expect("matching bins");
            (plan, re, im)
        })
    };
    let (p1, re1, im1) = run(1);
    let (p2, re2, im2) = run(2);
    assert_eq!(p1, p2);
    let bits = |v: &[Resampled]| -> Vec<u64> {
        v.iter()
            .flat_map(|r| std::iter::once(r.central).chain(r.samples.iter().copied()))
            .map(f64::to_bits)
            .collect()
    };
    assert_eq!(bits(&re1), bits(&re2));
    assert_eq!(bits(&im1), bits(&im2));
    // And each slice equals the single-slice mean.
    for t in 0..16 {
        assert_eq!(re1[t], p1.mean(s.re_at(t)));
        assert_eq!(im1[t], p1.mean(s.im_at(t)));
    }
}

#[test]
fn series_means_reject_a_plan_of_the_wrong_size() {
    let s = series_of(4, 10, 1);
    let err = ResamplePlan::jackknife(12)
        .means_of_series(&s, Part::Re)
        .expect_err("10 configurations against a plan for 12");
    assert!(err.to_string().contains("12"), "{err}");
    assert!(ResamplePlan::jackknife(1)
        .checked_mean(&[1.0], "x")
        .is_err());
}

/// Jackknife (or any scheme) correlation coefficient from resampled moments.
fn correlation_from_moments(plan: &ResamplePlan, x: &[f64], y: &[f64]) -> Resampled {
    let xy: Vec<f64> = x.iter().zip(y).map(|(a, b)| a * b).collect();
    let xx: Vec<f64> = x.iter().map(|a| a * a).collect();
    let yy: Vec<f64> = y.iter().map(|b| b * b).collect();
    let m = [x, y, &xy[..], &xx[..], &yy[..]].map(|v| plan.mean(v));
    let refs: Vec<&Resampled> = m.iter().collect();
    Resampled::combine(&refs, |v| {
        let (mx, my, mxy, mxx, myy) = (v[0], v[1], v[2], v[3], v[4]);
        (mxy - mx * my) / ((mxx - mx * mx) * (myy - my * my)).sqrt()
    })
}

fn pearson(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len() as f64;
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let sxx: f64 = x.iter().map(|a| (a - mx).powi(2)).sum();
    let syy: f64 = y.iter().map(|b| (b - my).powi(2)).sum();
    sxy / (sxx * syy).sqrt()
}

#[test]
fn law_school_jackknife_standard_error_of_correlation() {
    // Law school data, Efron & Tibshirani, An Introduction to the Bootstrap (1993), Table 3.1.
    let rows = read_csv("law-school/law.csv");
    let lsat: Vec<f64> = rows.iter().map(|r| r[0]).collect();
    let gpa: Vec<f64> = rows.iter().map(|r| r[1]).collect();
    let n = lsat.len();
    assert_eq!(n, 15);
    let r = correlation_from_moments(&ResamplePlan::jackknife(n), &lsat, &gpa);

    // Independent straightforward O(N^2) leave-one-out computation.
    let loo: Vec<f64> = (0..n)
        .map(|j| {
            let x: Vec<f64> = (0..n).filter(|&i| i != j).map(|i| lsat[i]).collect();
            let y: Vec<f64> = (0..n).filter(|&i| i != j).map(|i| gpa[i]).collect();
            pearson(&x, &y)
        })
        .collect();
    let loo_mean = loo.iter().sum::<f64>() / n as f64;
    let se = ((n as f64 - 1.0) / n as f64
        * loo.iter().map(|v| (v - loo_mean).powi(2)).sum::<f64>())
    .sqrt();
    for (a, b) in r.samples.iter().zip(&loo) {
        assert_relative_eq!(*a, *b, max_relative = 1e-10);
    }
    assert_relative_eq!(r.error(), se, max_relative = 1e-10);

    // Book: corr = .776 (Efron & Tibshirani 1993, ch. 3; from memory, unverified).
    assert_abs_diff_eq!(r.central, 0.776, epsilon = 5e-4);
    // Book: jackknife SE of the correlation about .142 (ch. 11; from memory, unverified).
    assert_abs_diff_eq!(r.error(), 0.142, epsilon = 1.5e-3);
    // MathWorks Statistics Toolbox `jackknife` documentation example on the same data:
    // jackknife mean of the leave-one-out correlations 0.7759, bias -0.0065.
    assert_abs_diff_eq!(r.sample_mean(), 0.7759, epsilon = 5e-5);
    assert_abs_diff_eq!(r.bias(), -0.0065, epsilon = 5e-5);
}

#[test]
fn law_school_bootstrap_standard_error_of_correlation() {
    // Efron & Tibshirani 1993, Table 6.1 (table number from memory): bootstrap SE of the law-school correlation
    // .132 for B = 3200 (from memory, unverified). B = 2000 here: Monte Carlo scatter about
    // 1.6 %, so a 10 % tolerance leaves room for the remembered value.
    let rows = read_csv("law-school/law.csv");
    let lsat: Vec<f64> = rows.iter().map(|r| r[0]).collect();
    let gpa: Vec<f64> = rows.iter().map(|r| r[1]).collect();
    let r = correlation_from_moments(&ResamplePlan::bootstrap(15, 2000, 1993), &lsat, &gpa);
    assert_relative_eq!(r.error(), 0.132, max_relative = 0.10);
    let (lo, hi) = r.percentile_interval(0.6827).expect("bootstrap samples");
    assert!(lo < r.central && r.central < hi, "{lo} {hi}");
}

#[test]
fn resampled_helpers() {
    // Definitions (Efron & Tibshirani 1993, bias chapters; from memory): jackknife bias
    // (N-1)(mean - c), bootstrap bias mean - c.
    let j = Resampled::new(1.0, vec![1.1, 0.9, 1.3, 1.1], Scheme::Jackknife);
    assert_relative_eq!(j.sample_mean(), 1.1, max_relative = 1e-14);
    assert_relative_eq!(j.bias(), 3.0 * 0.1, max_relative = 1e-12);
    assert_relative_eq!(j.bias_corrected(), 0.7, max_relative = 1e-12);
    let b = Resampled::new(1.0, vec![1.1, 0.9, 1.3, 1.1], Scheme::Bootstrap);
    assert_relative_eq!(b.bias_corrected(), 0.9, max_relative = 1e-12);
    let sum = b.samples.iter().map(|v| (v - 1.1f64).powi(2)).sum::<f64>();
    assert_relative_eq!(b.variance(), sum / 3.0, max_relative = 1e-12);
    assert_relative_eq!(j.variance(), sum * 3.0 / 4.0, max_relative = 1e-12);

    // mean_of averages sample by sample; incompatible inputs are an error, not a panic.
    let k = Resampled::new(3.0, vec![2.9, 3.1, 3.3, 2.7], Scheme::Jackknife);
    let m = Resampled::mean_of(&[j.clone(), k.clone()]).expect("compatible");
    assert_relative_eq!(m.central, 2.0);
    assert_relative_eq!(m.samples[2], 2.3, max_relative = 1e-14);
    assert!(Resampled::mean_of(&[]).is_err());
    assert!(Resampled::mean_of(&[j.clone(), b.clone()]).is_err());
    // The checked combinators used at stage boundaries: same numbers as the plain ones,
    // an error naming the values when plans differ (here 4 vs 3 samples, or schemes).
    let d = j
        .try_zip_map(&k, "j and k", |a, c| c - a)
        .expect("compatible");
    assert_relative_eq!(d.samples[3], 1.6, max_relative = 1e-14);
    let short = Resampled::new(1.0, vec![1.0, 1.0, 1.0], Scheme::Jackknife);
    let err = j
        .try_zip_map(&short, "j and short", |a, c| a + c)
        .unwrap_err();
    assert!(err.to_string().contains("j and short"), "{err}");
    assert!(j.try_zip_map(&b, "j and b", |a, c| a + c).is_err());
    let c = Resampled::try_combine(&[&j, &k], "pair", |x| x[0] * x[1]).expect("compatible");
    assert_relative_eq!(c.central, 3.0);
    assert_relative_eq!(c.samples[1], 0.9 * 3.1, max_relative = 1e-14);
    assert!(Resampled::try_combine(&[], "nothing", |x| x.len() as f64).is_err());
    assert!(Resampled::try_combine(&[&j, &short], "mixed", |x| x[0]).is_err());
    // Percentile interval = linear-interpolation quantiles (Hyndman & Fan, Am. Stat. 50 (1996)
    // 361, type 7): numpy 2.4.6 np.percentile(x, [15.865, 84.135]) on these 11 values gives
    // -0.136075 and 1.90675.
    let x = vec![0.31, 1.7, -0.4, 2.2, 0.05, 0.9, 1.1, -1.3, 0.66, 0.42, 3.1];
    let boot = Resampled::new(0.7, x, Scheme::Bootstrap);
    let (lo, hi) = boot.percentile_interval(0.6827).expect("bootstrap");
    assert_relative_eq!(lo, -0.136075, max_relative = 1e-12);
    assert_relative_eq!(hi, 1.90675, max_relative = 1e-12);
    assert!(j.percentile_interval(0.68).is_err());
    assert!(b.percentile_interval(1.5).is_err());
    let s = j.summary();
    assert_eq!(s.n_samples, 4);
    assert_relative_eq!(s.error, j.error());
    // summary() and variance() compute the samples' mean once; they must give the bits of
    // the definitions they stand for (covariance of the samples with themselves, the
    // bias-corrected value and the mean computed on their own).
    let irregular: Vec<f64> = (0..1001)
        .map(|i| (i as f64 * 0.37).sin() * 1e-3 + 0.8)
        .collect();
    for scheme in [Scheme::Jackknife, Scheme::Bootstrap] {
        let v = Resampled::new(0.8, irregular.clone(), scheme);
        let by_definition = covariance_of(&v.samples, &v.samples, scheme);
        assert_eq!(v.variance().to_bits(), by_definition.to_bits());
        let s = v.summary();
        assert_eq!(s.error.to_bits(), by_definition.sqrt().to_bits());
        assert_eq!(s.bias_corrected.to_bits(), v.bias_corrected().to_bits());
        assert_eq!(s.sample_mean.to_bits(), v.sample_mean().to_bits());
    }
    let single = Resampled::new(1.0, vec![1.0], Scheme::Jackknife).summary();
    assert!(single.error.is_nan());
}

#[test]
fn value_error_notation() {
    // Concise notation "value(uncertainty in units of the last digits)", BIPM GUM
    // (JCGM 100:2008) §7.2.2 (section from memory); two significant digits of the error (common practice).
    assert_eq!(fmt_value_error(0.92341, 0.00563), "0.9234(56)");
    assert_eq!(fmt_value_error(0.92341, 0.0996), "0.92(10)");
    assert_eq!(fmt_value_error(12.345, 1.2), "12.3(12)");
    assert_eq!(fmt_value_error(12344.0, 123.0), "12340(120)");
    assert_eq!(fmt_value_error(-1.5e-3, 2.25e-5), "-0.001500(23)");
    assert_eq!(fmt_value_error(2.0, 0.0), "2(0)");
    assert_eq!(fmt_value_error(1.5, f64::NAN), "1.5(NaN)");
    let r = Resampled::new(
        0.9234,
        vec![0.9234 - 0.0056, 0.9234 + 0.0056],
        Scheme::Bootstrap,
    );
    // bootstrap error of two samples +-d: sqrt(2 d^2 / 1) = 0.00792 -> 79
    assert_eq!(r.to_string(), "0.9234(79)");
}

// ---------------------------------------------------------------------------------------
// binning

fn two_point(configs: Vec<i64>, n_t: usize, seed: u64) -> TwoPointData {
    let mut d = TwoPointData {
        configs,
        ..Default::default()
    };
    let key = TwoPointKey {
        momentum: [0, 0, 1],
        smear: None,
        ops: None,
    };
    let n = d.configs.len();
    d.channels.insert(key, series_of(n_t, n, seed));
    d
}

#[test]
fn binning_drops_and_reports_trailing_configurations() {
    // Definition of binning (Flyvbjerg & Petersen, J. Chem. Phys. 91 (1989) 461): floor(N/b)
    // block means; here N = 23, b = 5: 4 bins, 3 configurations dropped.
    assert_eq!(bin_values(&[1.0, 2.0, 3.0, 4.0, 5.0], 2), vec![1.5, 3.5]);
    assert!(bin_values(&[1.0, 2.0], 0).is_empty());
    let configs: Vec<i64> = (0..23).map(|i| 100 + 4 * i).collect();
    let d = two_point(configs.clone(), 3, 8);
    let (b, report) = bin_twopt(&d, 5).expect("valid bin size");
    assert_eq!(report.bin_size, 5);
    assert_eq!(report.n_bins, 4);
    assert_eq!(report.dropped_configs, vec![180, 184, 188]);
    assert_eq!(b.configs, vec![100, 120, 140, 160]);
    let (src, dst) = (
        d.channels.values().next().expect("one channel"),
        b.channels.values().next().expect("one channel"),
    );
    assert_eq!((dst.n_t, dst.n_cfg), (3, 4));
    for t in 0..3 {
        for k in 0..4 {
            let want = src.re_at(t)[5 * k..5 * k + 5].iter().sum::<f64>() / 5.0;
            assert_relative_eq!(dst.re_at(t)[k], want, max_relative = 1e-14);
            let want = src.im_at(t)[5 * k..5 * k + 5].iter().sum::<f64>() / 5.0;
            assert_relative_eq!(dst.im_at(t)[k], want, max_relative = 1e-14);
        }
    }
    assert_eq!(bin_series(src, 5), *dst);
    // b = 1 keeps everything.
    let (same, r1) = bin_twopt(&d, 1).expect("b = 1");
    assert_eq!(same, d);
    assert!(r1.dropped_configs.is_empty());
}

#[test]
fn binning_rejects_bad_bin_sizes_without_panicking() {
    let d = two_point((0..10).collect(), 2, 3);
    let zero = bin_twopt(&d, 0).expect_err("b = 0");
    assert!(zero.to_string().contains("bin size 0"), "{zero}");
    let big = bin_twopt(&d, 11).expect_err("b > N");
    assert!(big.to_string().contains("larger than"), "{big}");
    assert!(bin_twopt(&d, 6).is_err(), "one bin cannot be resampled");
    assert!(bin_twopt(&TwoPointData::default(), 1).is_err());

    // A series that does not match the configuration list names its channel.
    let mut bad = ThreePointData {
        configs: (0..10).collect(),
        ..Default::default()
    };
    let key = ThreePointKey {
        tsep: 8,
        pf: [0, 0, 0],
        q: [1, 0, 0],
        current: Current::V4,
        projector: Projector::Unpol,
        flavor: Some("u-d".into()),
        diagram: None,
        ops: None,
    };
    bad.channels.insert(key, series_of(9, 9, 2));
    let err = bin_threept(&bad, 2).expect_err("9 configurations against 10");
    assert!(err.to_string().contains("V4"), "{err}");
    bad.channels
        .values_mut()
        .for_each(|s| *s = series_of(9, 10, 2));
    let (b, r) = bin_threept(&bad, 3).expect("valid");
    assert_eq!(
        (b.configs.clone(), r.dropped_configs),
        (vec![0, 3, 6], vec![9])
    );
}

#[test]
fn binning_tables_by_one_keeps_every_bit_and_every_check() {
    // The mean of one value is that value (analytic): bin_tables with b = 1 returns the
    // tables it was given, and they must equal bin_twopt / bin_threept bit for bit, also for
    // -0.0 and a subnormal (values where a sum from +0.0 would differ).
    let mut two = two_point((0..7).collect(), 3, 11);
    for s in two.channels.values_mut() {
        s.re[0] = -0.0;
        s.im[1] = 4e-320;
    }
    let three = ThreePointData {
        configs: two.configs.clone(),
        ..Default::default()
    };
    let bits = |d: &TwoPointData| -> Vec<u64> {
        d.channels
            .values()
            .flat_map(|s| s.re.iter().chain(&s.im).map(|v| v.to_bits()))
            .collect()
    };
    let (copied, r_copied) = bin_twopt(&two, 1).expect("b = 1");
    let (kept, _, r_kept) = bin_tables(two.clone(), three.clone(), 1).expect("b = 1");
    assert_eq!(bits(&kept), bits(&copied));
    assert_eq!(bits(&kept), bits(&two));
    assert_eq!((kept.configs, r_kept), (copied.configs, r_copied));
    // Other bin sizes go through the copying binning.
    let (by2, _, r2) = bin_tables(two.clone(), three.clone(), 2).expect("b = 2");
    assert_eq!((by2, r2), bin_twopt(&two, 2).expect("b = 2"));
    // The checks still run with b = 1: a series that does not match the configurations.
    let mut bad = two.clone();
    for s in bad.channels.values_mut() {
        *s = series_of(3, 6, 2);
    }
    let err = bin_tables(bad, three, 1).expect_err("6 configurations against 7");
    assert!(err.to_string().contains("6 configurations"), "{err}");
}

// ---------------------------------------------------------------------------------------
// covariance

/// The 12 x 4 data set fed to scikit-learn (rows = observations).
const LW_DATA: [[f64; 4]; 12] = [
    [2.029, 1.616, 1.262, 4.698],
    [-0.393, -4.148, 0.306, 6.772],
    [2.810, 1.797, 1.121, 4.595],
    [-0.108, -1.991, 0.265, 7.793],
    [-0.376, -4.726, -0.626, 1.069],
    [1.903, -2.332, 0.090, 4.344],
    [0.332, -3.372, 0.006, 5.577],
    [0.569, -2.363, 0.256, 6.231],
    [1.225, 0.349, 0.339, 8.703],
    [0.597, -3.794, 0.540, 4.208],
    [0.612, -4.287, -0.844, 3.875],
    [-0.165, -2.930, 0.865, 6.471],
];

/// scikit-learn 1.9.1 (numpy 2.4.6), `sklearn.covariance.LedoitWolf().fit(LW_DATA)`:
/// `shrinkage_` and `covariance_` (target mu I, sample covariance with 1/n).
const SKLEARN_SHRINKAGE: f64 = 0.3957727704271368;
const SKLEARN_COVARIANCE: [[f64; 4]; 4] = [
    [
        1.5632410059378654,
        1.04648023499531,
        0.17618220365555737,
        -0.0886032599332454,
    ],
    [
        1.04648023499531,
        3.7920936316831817,
        0.5712140664306906,
        0.7752423169383692,
    ],
    [
        0.17618220365555737,
        0.5712140664306906,
        1.1828657529937858,
        0.24791396233923388,
    ],
    [
        -0.0886032599332454,
        0.7752423169383692,
        0.24791396233923388,
        3.2398518177185,
    ],
];

fn assert_matches_sklearn(m: &nalgebra::DMatrix<f64>, scale: f64) {
    for (i, row) in SKLEARN_COVARIANCE.iter().enumerate() {
        for (j, want) in row.iter().enumerate() {
            assert_relative_eq!(m[(i, j)] * scale, *want, max_relative = 1e-12);
        }
    }
}

fn shrink(target: ShrinkageTarget, intensity: Option<f64>) -> CovarianceOptions {
    CovarianceOptions {
        kind: CovarianceKind::Shrinkage { target, intensity },
        eigen_cut: None,
    }
}

#[test]
fn ledoit_wolf_identity_target_matches_scikit_learn() {
    let n = LW_DATA.len();
    let column = |i: usize| -> Vec<f64> { LW_DATA.iter().map(|r| r[i]).collect() };
    // (a) jackknife means of the data: deviations rescaled by N-1 are the data deviations.
    let plan = ResamplePlan::jackknife(n);
    let jack: Vec<Resampled> = (0..4).map(|i| plan.mean(&column(i))).collect();
    let est = estimate(&jack, &shrink(ShrinkageTarget::Identity, None)).expect("estimate");
    assert_relative_eq!(
        est.shrinkage.expect("shrinkage"),
        SKLEARN_SHRINKAGE,
        max_relative = 1e-12
    );
    // The jackknife covariance of the means is S / (n-1), S the 1/n sample covariance that
    // scikit-learn uses, and shrinkage is linear: ours * (n-1) = sklearn's covariance_.
    assert_matches_sklearn(&est.matrix, n as f64 - 1.0);
    // (b) the rows as bootstrap-like draws: C = S_1/n * n/(n-1).
    let draws: Vec<Resampled> = (0..4)
        .map(|i| Resampled::new(0.0, column(i), Scheme::Bootstrap))
        .collect();
    let est = estimate(&draws, &shrink(ShrinkageTarget::Identity, None)).expect("estimate");
    assert_relative_eq!(
        est.shrinkage.expect("shrinkage"),
        SKLEARN_SHRINKAGE,
        max_relative = 1e-12
    );
    assert_matches_sklearn(&est.matrix, (n as f64 - 1.0) / n as f64);
    // 12 samples for 4 values: fewer than 5 d, so the Hartlap warning is there.
    assert!(
        est.warnings.iter().any(|w| w.contains("Hartlap")),
        "{:?}",
        est.warnings
    );
}

#[test]
fn ledoit_wolf_diagonal_target_matches_scikit_learn_on_sign_data() {
    // For data whose standardised entries are all +-1 the diagonal terms of Ledoit–Wolf's
    // noise estimate vanish, so shrinking the correlation matrix toward the identity and
    // shrinking toward mu I coincide. scikit-learn 1.9.1, LedoitWolf().fit(Z).shrinkage_ on
    // the +-1 matrix Z below (correlations 0.6, 0.6, 0.2) gives 0.2947368421052633
    // (= 0.448 / 1.52 by hand).
    let z: [[f64; 3]; 10] = [
        [1.0, 1.0, 1.0],
        [1.0, 1.0, -1.0],
        [1.0, 1.0, 1.0],
        [1.0, -1.0, 1.0],
        [1.0, 1.0, 1.0],
        [-1.0, -1.0, -1.0],
        [-1.0, -1.0, 1.0],
        [-1.0, -1.0, -1.0],
        [-1.0, 1.0, -1.0],
        [-1.0, -1.0, -1.0],
    ];
    let sklearn = 0.2947368421052633;
    // Scale and shift the columns: the diagonal target is invariant, the identity one is not.
    let (scale, shift) = ([2.0, 0.05, 7.0], [1.0, -3.0, 100.0]);
    let values: Vec<Resampled> = (0..3)
        .map(|i| {
            let s = z.iter().map(|r| r[i] * scale[i] + shift[i]).collect();
            Resampled::new(shift[i], s, Scheme::Bootstrap)
        })
        .collect();
    let full = estimate(&values, &CovarianceOptions::default()).expect("full");
    let est = estimate(&values, &shrink(ShrinkageTarget::Diagonal, None)).expect("shrink");
    let lambda = est.shrinkage.expect("shrinkage");
    assert_relative_eq!(lambda, sklearn, max_relative = 1e-12);
    for (i, v) in values.iter().enumerate() {
        for j in 0..3 {
            let f = if i == j { 1.0 } else { 1.0 - lambda };
            assert_relative_eq!(
                est.matrix[(i, j)],
                f * full.matrix[(i, j)],
                max_relative = 1e-12
            );
        }
        assert_relative_eq!(full.matrix[(i, i)], v.variance(), max_relative = 1e-12);
    }
    // Fixed intensity, and out-of-range intensity is an error.
    let fixed = estimate(&values, &shrink(ShrinkageTarget::Diagonal, Some(0.25))).expect("ok");
    assert_relative_eq!(
        fixed.matrix[(0, 1)],
        0.75 * full.matrix[(0, 1)],
        max_relative = 1e-12
    );
    assert!(estimate(&values, &shrink(ShrinkageTarget::Diagonal, Some(1.5))).is_err());
    // With B draws from N = 5 bins the noise terms are doubled: lambda = 2 * 0.4474 -> clipped.
    let few = estimate_with_bins(&values, &shrink(ShrinkageTarget::Diagonal, None), 5)
        .expect("bootstrap from 5 bins");
    assert_relative_eq!(few.shrinkage.expect("shrinkage"), (2.0 * sklearn).min(1.0));
}

/// Two values with sample correlation exactly `r`, errors `sa` and `sb` (jackknife, N = 4).
fn correlated_pair(r: f64, sa: f64, sb: f64) -> Vec<Resampled> {
    let a = [1.0, -1.0, 1.0, -1.0];
    let c = [1.0, 1.0, -1.0, -1.0];
    let b: Vec<f64> = a
        .iter()
        .zip(&c)
        .map(|(x, y)| r * x + (1.0 - r * r).sqrt() * y)
        .collect();
    let unit = Resampled::new(0.0, a.to_vec(), Scheme::Jackknife).error();
    vec![
        Resampled::new(
            0.0,
            a.iter().map(|x| x * sa / unit).collect(),
            Scheme::Jackknife,
        ),
        Resampled::new(
            0.0,
            b.iter().map(|x| x * sb / unit).collect(),
            Scheme::Jackknife,
        ),
    ]
}

#[test]
fn eigenvalue_cut_raises_small_correlation_eigenvalues() {
    // Analytic: [[1, r], [r, 1]] has eigenvalues 1 +- r with eigenvectors (1, +-1)/sqrt(2).
    // r = 0.999, cut 0.01: 1 - r = 0.001 is raised to 0.01 * 1.999 = 0.01999, giving
    // R' = [[(1.999 + 0.01999)/2, (1.999 - 0.01999)/2], ...].
    let (sa, sb) = (0.3, 2.0);
    let v = correlated_pair(0.999, sa, sb);
    let full = estimate(&v, &CovarianceOptions::default()).expect("full");
    assert_relative_eq!(full.matrix[(0, 1)], 0.999 * sa * sb, max_relative = 1e-12);
    assert_relative_eq!(v[0].correlation(&v[1]), 0.999, max_relative = 1e-12);
    assert_relative_eq!(full.condition_number, 1.999 / 0.001, max_relative = 1e-8);
    let opts = CovarianceOptions {
        kind: CovarianceKind::Full,
        eigen_cut: Some(0.01),
    };
    let cut = estimate(&v, &opts).expect("cut");
    assert_eq!(cut.n_eigen_cut, 1);
    let (d, o) = ((1.999 + 0.01999) / 2.0, (1.999 - 0.01999) / 2.0);
    assert_relative_eq!(cut.matrix[(0, 0)], d * sa * sa, max_relative = 1e-10);
    assert_relative_eq!(cut.matrix[(1, 1)], d * sb * sb, max_relative = 1e-10);
    assert_relative_eq!(cut.matrix[(0, 1)], o * sa * sb, max_relative = 1e-10);
    assert_relative_eq!(cut.condition_number, (d + o) / (d - o), max_relative = 1e-8);
    assert!(estimate(
        &v,
        &CovarianceOptions {
            eigen_cut: Some(0.0),
            ..opts
        }
    )
    .is_err());
}

#[test]
fn diagonal_covariance_and_singular_warnings() {
    let v = correlated_pair(0.5, 1.0, 3.0);
    let opts = CovarianceOptions {
        kind: CovarianceKind::Diagonal,
        eigen_cut: None,
    };
    let diag = estimate(&v, &opts).expect("diagonal");
    assert_relative_eq!(diag.matrix[(0, 0)], 1.0, max_relative = 1e-12);
    assert_relative_eq!(diag.matrix[(1, 1)], 9.0, max_relative = 1e-12);
    assert_eq!(diag.matrix[(0, 1)], 0.0);
    assert!(diag.warnings.is_empty(), "{:?}", diag.warnings);
    assert_relative_eq!(diag.condition_number, 1.0, max_relative = 1e-12);

    // Three values from 4 jackknife samples with an exact linear relation: rank 2, singular.
    let plan = ResamplePlan::jackknife(4);
    let a = plan.mean(&[1.0, 2.0, 4.0, 3.5]);
    let b = plan.mean(&[0.5, -1.0, 2.0, 1.0]);
    let c = &a + &b;
    let est = estimate(&[a.clone(), b.clone(), c], &CovarianceOptions::default()).expect("est");
    assert!(
        est.warnings.iter().any(|w| w.contains("singular")),
        "{:?}",
        est.warnings
    );
    assert!(
        est.inverse().is_err(),
        "a singular covariance must not be inverted"
    );
    // Invertible case: the inverse really is the inverse.
    let ok = estimate(&[a, b], &CovarianceOptions::default()).expect("est");
    let inv = ok.inverse().expect("invertible");
    let id = &ok.matrix * inv;
    assert_abs_diff_eq!(id[(0, 0)], 1.0, epsilon = 1e-10);
    assert_abs_diff_eq!(id[(0, 1)], 0.0, epsilon = 1e-10);

    // Zero variance and non-finite samples are errors.
    let flat = Resampled::constant(1.0, 4, Scheme::Jackknife);
    assert!(estimate(&[flat, v[0].clone()], &CovarianceOptions::default()).is_err());
    let nan = Resampled::new(0.0, vec![1.0, f64::NAN, 0.0, 2.0], Scheme::Jackknife);
    assert!(estimate(&[nan], &CovarianceOptions::default()).is_err());
    assert!(estimate(&[], &CovarianceOptions::default()).is_err());
}

#[test]
fn hartlap_factor_values() {
    // Hartlap, Simon & Schneider, A&A 464 (2007) 399: (n - p - 2)/(n - 1).
    assert_relative_eq!(hartlap_factor(100, 10).expect("n > d + 2"), 88.0 / 99.0);
    assert_eq!(hartlap_factor(12, 10), None);
}

#[test]
fn covariance_options_from_yaml() {
    // The pipeline YAML spellings documented in the covariance module.
    let parse = |s: &str| serde_yaml_ng::from_str::<CovarianceOptions>(s);
    assert_eq!(
        parse("kind: full").expect("full").kind,
        CovarianceKind::Full
    );
    assert_eq!(
        parse("kind: diagonal").expect("diag").kind,
        CovarianceKind::Diagonal
    );
    let s = parse("kind: shrinkage\neigen_cut: 1.0e-4").expect("shrinkage");
    assert_eq!(s.kind, shrink(ShrinkageTarget::Diagonal, None).kind);
    assert_eq!(s.eigen_cut, Some(1e-4));
    let s = parse("kind:\n  shrinkage:\n    target: identity\n    intensity: 0.3").expect("map");
    assert_eq!(s.kind, shrink(ShrinkageTarget::Identity, Some(0.3)).kind);
    assert_eq!(parse("{}").expect("defaults"), CovarianceOptions::default());
    let err = parse("kind: shrunk").expect_err("unknown kind");
    assert!(err.to_string().contains("shrinkage"), "{err}");
    assert!(parse("kind: full\ncut: 3").is_err());
    // What is written can be read back (the run manifest records the options).
    for kind in [
        CovarianceKind::Full,
        CovarianceKind::Diagonal,
        shrink(ShrinkageTarget::Identity, Some(0.3)).kind,
        shrink(ShrinkageTarget::Diagonal, None).kind,
    ] {
        let o = CovarianceOptions {
            kind,
            eigen_cut: Some(1e-3),
        };
        let text = serde_yaml_ng::to_string(&o).expect("serialise");
        assert_eq!(parse(&text).expect(&text), o);
        let json = serde_json::to_string(&o).expect("serialise");
        assert_eq!(
            serde_json::from_str::<CovarianceOptions>(&json).expect(&json),
            o
        );
    }
    // The JSON Schema lists the names a user may write.
    let schema = serde_json::to_string(&schemars::schema_for!(CovarianceOptions)).expect("json");
    for word in [
        "\"full\"",
        "\"shrinkage\"",
        "\"identity\"",
        "intensity",
        "eigen_cut",
    ] {
        assert!(schema.contains(word), "{word} missing from {schema}");
    }
}

// ---------------------------------------------------------------------------------------
// autocorrelation

#[test]
fn gamma_method_on_ar1_chains() {
    // Analytic: an AR(1) chain with coefficient rho has tau_int = (1 + rho) / (2 (1 - rho))
    // and variance 1/(1 - rho^2) for unit innovations (methods.md §7; Wolff 2004, §5).
    for (rho_ar, seed) in [(0.5, 21u64), (0.9, 22u64)] {
        let tau = (1.0 + rho_ar) / (2.0 * (1.0 - rho_ar));

        // 16 independent chains: each tau_int within 3.5 quoted errors; the mean pull
        // (tau_int - tau)/error within 3 sigma of zero (3/sqrt(16)); the rms pull near 1, so
        // the quoted error is honest. (3 rather than 2 sigma because several seeded checks
        // share this test. A one-off study of 200 chains of N = 50 000 gave mean pulls
        // -0.08 +- 0.06 (rho 0.5) and -0.07 +- 0.07 (rho 0.9), rms pulls 0.86 and 0.96.)
        let pulls: Vec<f64> = (0..16)
            .map(|k| {
                let r = gamma_method(&ar1(50_000, rho_ar, 1000 * seed + k), DEFAULT_S)
                    .expect("long chain");
                let pull = (r.tau_int - tau) / r.tau_int_error;
                assert!(pull.abs() < 3.5, "rho {rho_ar}: {r:?}");
                pull
            })
            .collect();
        let mean_pull = pulls.iter().sum::<f64>() / 16.0;
        let rms_pull = (pulls.iter().map(|p| p * p).sum::<f64>() / 16.0).sqrt();
        assert!(
            mean_pull.abs() < 0.75,
            "rho {rho_ar}: mean pull {mean_pull}"
        );
        assert!(
            (0.6..1.4).contains(&rms_pull),
            "rho {rho_ar}: rms pull {rms_pull}"
        );

        // One long chain: error of the mean, rho(t) = rho^t, and the binning study.
        let n = 200_000;
        let x = ar1(n, rho_ar, seed);
        let r = gamma_method(&x, DEFAULT_S).expect("long chain");
        assert!(r.warnings.is_empty(), "{:?}", r.warnings);
        assert_eq!(r.n, n);
        assert!(
            (r.tau_int - tau).abs() < 3.0 * r.tau_int_error,
            "rho {rho_ar}: tau_int {} +- {} vs {tau}",
            r.tau_int,
            r.tau_int_error
        );
        let true_error = (2.0 * tau / (1.0 - rho_ar * rho_ar) / n as f64).sqrt();
        // The error scales as sqrt(tau_int): relative uncertainty about half that of tau_int.
        assert_relative_eq!(
            r.error,
            true_error,
            max_relative = 1.5 * r.tau_int_error / r.tau_int
        );
        assert_abs_diff_eq!(r.mean, 0.0, epsilon = 3.0 * true_error);
        let rh = rho(&x, 3).expect("rho");
        assert_abs_diff_eq!(rh[1], rho_ar, epsilon = 0.01);
        assert_abs_diff_eq!(rh[2], rho_ar * rho_ar, epsilon = 0.02);

        // Binning study (Flyvbjerg & Petersen 1989): b = 1 gives the naive error
        // sqrt(var/N); large bins level off at the true error (bins of 200 >> tau: the residual
        // bias is about tau/b, and the error of the error about sqrt(2/1000)).
        let study = binning_study(&x, 200);
        assert_eq!(study.len(), 200);
        let naive = (1.0 / (1.0 - rho_ar * rho_ar) / n as f64).sqrt();
        assert_relative_eq!(study[0].error, naive, max_relative = 0.03);
        assert_relative_eq!(study[199].error, true_error, max_relative = 0.15);
    }
}

#[test]
fn pooled_tau_int_of_ar1_chains_binned_and_unbinned() {
    // Analytic: an AR(1) chain with coefficient rho has tau_int = (1 + rho) / (2 (1 - rho))
    // (methods.md §7); its bins of 2 have tau_int = 1 / (2 (1 - rho)) (the error of the mean
    // does not depend on the binning, and a bin of two has (1 + rho)/2 of one value's
    // variance), and independent data have 1/2. 64 chains of 200 values at rho = 0.3,
    // pooled: 0.929 unbinned, 0.714 in bins of 2. The pooled estimate must land within 0.06
    // of each (a third of the distance between the three values; the one-chain error of 0.2
    // at N = 100 would not separate them), and within its own quoted (one-chain) error.
    let rho_ar = 0.3;
    let chains: Vec<Vec<f64>> = (0..64).map(|k| ar1(200, rho_ar, 7700 + k)).collect();
    let binned: Vec<Vec<f64>> = chains.iter().map(|c| bin_values(c, 2)).collect();
    let white: Vec<Vec<f64>> = (0..64).map(|k| gaussian(100, 7800 + k)).collect();
    for (what, data, tau) in [
        ("unbinned", &chains, (1.0 + rho_ar) / (2.0 * (1.0 - rho_ar))),
        ("bins of 2", &binned, 1.0 / (2.0 * (1.0 - rho_ar))),
        ("independent", &white, 0.5),
    ] {
        let views: Vec<&[f64]> = data.iter().map(Vec::as_slice).collect();
        let r = pooled_gamma_method(&views, DEFAULT_S).expect("pooled");
        println!(
            "{what}: tau_int {:.3} +- {:.3} (W {}) vs {tau:.3}",
            r.tau_int, r.tau_int_error, r.window
        );
        assert_eq!((r.chains, r.n), (64, data[0].len()));
        assert!((r.tau_int - tau).abs() < 0.06, "{what}: {r:?} vs {tau}");
        assert!((r.tau_int - tau).abs() < r.tau_int_error, "{what}: {r:?}");
    }
    // Chains of different lengths are refused; constant chains are skipped.
    let mixed = [chains[0].as_slice(), binned[0].as_slice()];
    assert!(pooled_gamma_method(&mixed, DEFAULT_S).is_err());
    let flat = vec![1.0; 200];
    let with_flat = [chains[0].as_slice(), flat.as_slice()];
    assert_eq!(
        pooled_gamma_method(&with_flat, DEFAULT_S)
            .expect("one left")
            .chains,
        1
    );
    assert!(pooled_gamma_method(&[flat.as_slice()], DEFAULT_S).is_err());
}

fn mom_key(n: i32) -> TwoPointKey {
    TwoPointKey {
        momentum: [n, 0, 0],
        smear: None,
        ops: None,
    }
}

#[test]
fn inflation_decision_and_its_effect_on_errors() {
    // 40 two-point time series of 400 bins of 2 configurations from AR(1) chains at rho = 0.3:
    // pooled tau_int of the bins near 1/(2 (1 - rho)) = 0.714 (analytic, see above), beyond
    // 1/2 by more than its one-chain error (about 0.14 at N = 400; at N = 50 it would be 0.34
    // and `auto` would only mention it), so `auto` inflates by sqrt(2 tau_int) ~ 1.2 and
    // `never` only warns. Inflating the bins' deviations scales the jackknife error of every
    // mean by exactly that factor (identity: the jackknife deviations are linear in the bins'
    // deviations).
    let (n_t, n_cfg) = (4, 800);
    let mut two = TwoPointData {
        configs: (0..n_cfg as i64).collect(),
        channels: Default::default(),
    };
    for c in 0..10 {
        let mut s = Series::zeros(n_t, n_cfg);
        for t in 0..n_t {
            let x = ar1(n_cfg, 0.3, 9100 + 10 * c + t as u64);
            s.re[t * n_cfg..(t + 1) * n_cfg].copy_from_slice(&x);
        }
        two.channels.insert(mom_key(c as i32), s);
    }
    let (mut binned, _) = bin_twopt(&two, 2).expect("bins");
    let measured = inflation::measure(&binned, &ThreePointData::default());
    assert!(measured.threept.is_err(), "no three-point data");
    let r = measured.twopt.as_ref().expect("measured").clone();
    assert_eq!((r.chains, r.n), (40, 400));
    assert!((r.tau_int - 0.714).abs() < 0.05, "{r:?}");
    let auto = inflation::decide(&measured, Inflation::Auto, 2);
    let f = auto.factor.expect("auto inflates");
    assert_relative_eq!(f, (2.0 * r.tau_int).sqrt(), max_relative = 1e-12);
    assert!(
        auto.message
            .as_deref()
            .is_some_and(|m| m.contains("inflated")),
        "{auto:?}"
    );
    let never = inflation::decide(&measured, Inflation::Never, 2);
    assert_eq!(never.factor, None);
    assert!(
        never
            .message
            .as_deref()
            .is_some_and(|m| m.contains("short")),
        "{never:?}"
    );
    let plan = ResamplePlan::jackknife(400);
    let key = mom_key(3);
    let before: Vec<Resampled> = plan
        .means_of_series(&binned.channels[&key], Part::Re)
        .unwrap();
    inflation::inflate_all(&mut binned, &mut ThreePointData::default(), f);
    let after: Vec<Resampled> = plan
        .means_of_series(&binned.channels[&key], Part::Re)
        .unwrap();
    for (b, a) in before.iter().zip(&after) {
        assert_relative_eq!(a.central, b.central, max_relative = 1e-12);
        assert_relative_eq!(a.error(), f * b.error(), max_relative = 1e-9);
    }
    // Independent data: tau_int near 1/2, nothing to do under `auto`.
    let mut white = TwoPointData {
        configs: (0..50).collect(),
        channels: Default::default(),
    };
    for c in 0..10 {
        let mut s = Series::zeros(n_t, 50);
        for t in 0..n_t {
            s.re[t * 50..(t + 1) * 50].copy_from_slice(&gaussian(50, 9300 + 10 * c + t as u64));
        }
        white.channels.insert(mom_key(c as i32), s);
    }
    let measured = inflation::measure(&white, &ThreePointData::default());
    assert_eq!(
        inflation::decide(&measured, Inflation::Auto, 1).factor,
        None,
        "{measured:?}"
    );
}

#[test]
fn sample_variances_are_the_variances_of_each_samples_bins() {
    // Definition: jackknife sample j keeps every bin but j; bootstrap sample k holds the bins
    // it drew, with multiplicity. Reference: the unbiased variance of those bins computed
    // directly (times N/(N-1) for the bootstrap, whose samples' variance has expectation
    // (N-1)/N of the bins' variance: the variance of the empirical distribution).
    let x = gaussian(12, 41);
    let n = x.len();
    let var = |v: &[f64]| {
        let (_, s) = mean_sd(v);
        s * s
    };
    let jack = ResamplePlan::jackknife(n).sample_variances(&x);
    for (j, v) in jack.iter().enumerate() {
        let kept: Vec<f64> = (0..n).filter(|&i| i != j).map(|i| x[i]).collect();
        assert_relative_eq!(*v, var(&kept), max_relative = 1e-12);
    }
    let boot = ResamplePlan::bootstrap(n, 4000, 5);
    let vb = boot.sample_variances(&x);
    let ResamplePlan::Bootstrap { counts, .. } = &boot else {
        unreachable!("a bootstrap plan")
    };
    for (k, v) in vb.iter().enumerate().take(20) {
        let drawn: Vec<f64> = counts[k * n..(k + 1) * n]
            .iter()
            .zip(&x)
            .flat_map(|(&c, &xi)| std::iter::repeat_n(xi, c as usize))
            .collect();
        assert_relative_eq!(
            *v,
            var(&drawn) * n as f64 / (n as f64 - 1.0),
            max_relative = 1e-12
        );
    }
    // Their average over 4000 samples is the bins' variance (expectation identity above;
    // the relative spread of one sample's variance is about sqrt(2/N) = 0.4, so 4000 samples
    // pin the mean to about 0.7 %; 3 % allowed).
    let mean_vb = vb.iter().sum::<f64>() / vb.len() as f64;
    assert_relative_eq!(mean_vb, var(&x), max_relative = 0.03);
    let scales = boot.sample_error_scales(&x);
    assert_relative_eq!(scales[3], (vb[3] / var(&x)).sqrt(), max_relative = 1e-12);
    // Too few bins, or a length that does not match the plan: NaN, no panic.
    assert!(ResamplePlan::jackknife(2).sample_variances(&x[..2])[0].is_nan());
    assert!(ResamplePlan::jackknife(5).sample_variances(&x)[0].is_nan());
    assert!(ResamplePlan::jackknife(n)
        .sample_error_scales(&[1.0; 12])
        .iter()
        .all(|s| *s == 1.0));
}

#[test]
fn gamma_method_on_independent_data_and_bad_input() {
    // Independent data: tau_int = 1/2 (definition: rho(t) = 0 for t > 0; Wolff 2004).
    let x = gaussian(50_000, 3);
    let r = gamma_method(&x, DEFAULT_S).expect("white noise");
    assert!(
        (r.tau_int - 0.5).abs() < 2.0 * r.tau_int_error.max(0.005),
        "{r:?}"
    );
    let (_, s) = mean_sd(&x);
    assert_relative_eq!(r.error, s / (x.len() as f64).sqrt(), max_relative = 0.05);

    assert!(
        gamma_method(&[1.0; 100], DEFAULT_S).is_err(),
        "constant chain"
    );
    assert!(
        gamma_method(&[1.0, 2.0, 3.0], DEFAULT_S).is_err(),
        "too short"
    );
    assert!(gamma_method(&x, 0.0).is_err(), "S must be positive");
    let mut with_nan = x[..100].to_vec();
    with_nan[7] = f64::NAN;
    assert!(gamma_method(&with_nan, DEFAULT_S).is_err());
    // A short chain with a long correlation is flagged, not silently trusted.
    let short = ar1(200, 0.99, 4);
    match gamma_method(&short, DEFAULT_S) {
        Ok(r) => assert!(!r.warnings.is_empty(), "{r:?}"),
        Err(e) => assert!(e.to_string().contains("autocorrelation"), "{e}"),
    }
}

#[test]
fn nist_univariate_certified_values() {
    // NIST StRD Univariate Summary Statistics: certified mean, standard deviation (n - 1) and
    // lag-1 autocorrelation r(1) = sum_{i>=2}(y_i - ybar)(y_{i-1} - ybar) / sum (y_i - ybar)^2.
    // The jackknife error of the mean times sqrt(N) is the sd (identity, Efron & Tibshirani
    // 1993, jackknife chapter); Wolff's rho(1) uses 1/(N-1) for the lag-1 sum and 1/N for Gamma(0), so
    // r(1) = (N-1)/N rho(1).
    for name in [
        "Michelso", "Mavro", "PiDigits", "NumAcc1", "NumAcc2", "NumAcc3", "NumAcc4",
    ] {
        let y: Vec<f64> = read_csv(&format!("nist-strd-univariate/{name}.csv"))
            .into_iter()
            .map(|r| r[0])
            .collect();
        let n = y.len();
        assert_eq!(n as f64, certified(name, "number_of_observations"));
        let m = ResamplePlan::jackknife(n).mean(&y);
        assert_relative_eq!(m.central, certified(name, "mean"), max_relative = 1e-15);
        // Jackknife samples are stored as absolute values, x̄ - (x_j - x̄)/(N-1): each is
        // rounded to ulp(x̄), so the sd they give is good to about
        // ulp(x̄) (N-1) / (sd sqrt(N)) relative — 1e-6 for NumAcc4 (1e7 offset, sd 0.1),
        // 1e-11 for Michelso. Allow 10 times that bound (and at least 1e-13).
        let sd_cert = certified(name, "std_dev");
        let ulp = m.central.abs() * f64::EPSILON;
        let tol = (10.0 * ulp * (n as f64 - 1.0) / (sd_cert * (n as f64).sqrt())).max(1e-13);
        let sd = m.error() * (n as f64).sqrt();
        assert_relative_eq!(sd, sd_cert, max_relative = tol);
        let r1 = certified(name, "autocorrelation_lag1");
        let ours = sample_autocorrelation(&y, 1).expect("lag 1");
        assert_relative_eq!(ours, r1, max_relative = 1e-13);
        if n >= 10 {
            let wolff = rho(&y, 1).expect("rho")[1] * (n as f64 - 1.0) / n as f64;
            assert_relative_eq!(wolff, r1, max_relative = 1e-13);
        }
    }
}

proptest::proptest! {
    // Parenthesis notation (GUM §7.2.2, section from memory): reading `v(u)` back gives the
    // value within half a unit of its last digit and the error to two significant digits.
    #[test]
    fn value_error_notation_reads_back(v in -1e6f64..1e6, log_e in -9f64..4.0) {
        let e = 10f64.powf(log_e);
        let text = fmt_value_error(v, e);
        let (vs, rest) = text.split_once('(').expect("parenthesis");
        let us = rest.strip_suffix(')').expect("closing parenthesis");
        let decimals = vs.split_once('.').map_or(0, |(_, d)| d.len()) as i32;
        let units: f64 = us.parse().expect("integer error");
        let value: f64 = vs.parse().expect("number");
        let unit = if decimals > 0 { 10f64.powi(-decimals) } else { 1.0 };
        let err = if decimals > 0 { units * unit } else { units };
        // Half a last digit, plus the f64 resolution of |v| when the digits run out.
        let slack = 0.5 * unit.max(err / 10.0) + 4.0 * v.abs() * f64::EPSILON;
        proptest::prop_assert!((value - v).abs() <= slack, "{} vs {}", value, v);
        proptest::prop_assert!((err - e).abs() <= 0.05 * e + 1e-12, "{} vs {}", err, e);
    }
}

//! Integration tests: resample (binning, jackknife / bootstrap, covariance, autocorrelation).
//! Every check names its external source in a comment.

use approx::assert_relative_eq;
use formfactory::resample::ResamplePlan;

#[test]
fn jackknife_error_of_mean_is_standard_error() {
    // Identity: the jackknife error of the mean equals s / sqrt(N) (Efron & Tibshirani 1993, §11.2).
    let x: Vec<f64> = (0..37).map(|i| ((i * 7919) % 101) as f64 * 0.37).collect();
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    let s2 = x.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (n - 1.0);
    let r = ResamplePlan::jackknife(x.len()).mean(&x);
    assert_relative_eq!(r.central, m, max_relative = 1e-14);
    assert_relative_eq!(r.error(), (s2 / n).sqrt(), max_relative = 1e-12);
}

#[test]
fn bootstrap_plan_is_reproducible() {
    let a = ResamplePlan::bootstrap(20, 50, 7);
    let b = ResamplePlan::bootstrap(20, 50, 7);
    assert_eq!(a, b);
    assert_ne!(a, ResamplePlan::bootstrap(20, 50, 8));
}

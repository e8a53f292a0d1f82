//! Integration tests: Q² fits (methods.md §6) and the decomposition + Q² closure.

use approx::{assert_abs_diff_eq, assert_relative_eq};
use formfactory::data::{Current, Momentum, Projector};
use formfactory::fit::Prior;
use formfactory::fit::Weighting;
use formfactory::kinematics::{
    coefficients, decompose, q_squared, ChannelValue, DecompositionSettings, Dispersion, Energies,
    FormFactor, Hadron, KinematicSetup, HBARC_GEV_FM,
};
use formfactory::q2::{
    dirac_pauli_radii, fit, t0_optimal, z, Q2FitSettings, Q2Model, Q2Point, Q2Units, TCut, ZPrior,
    T0,
};
use formfactory::resample::{ResamplePlan, Resampled, Scheme};
use nalgebra::Complex;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::common::q2::{noisy_points, normal, settings};

fn dipole(q2: f64, g0: f64, m2: f64) -> f64 {
    g0 / (1.0 + q2 / m2).powi(2)
}

// Standard proton dipole, M^2 = 0.71 GeV^2, gives r = sqrt(12/M^2) hbar c = 0.811 fm
// (common practice). Fitted from exact-mean dipole data in GeV^2.
#[test]
fn standard_dipole_radius() {
    let q2s = [0.05, 0.1, 0.2, 0.35, 0.5, 0.8];
    let pts = noisy_points(&q2s, |q2| dipole(q2, 1.0, 0.71), 1e-4, 50, 1);
    let f = fit(
        &pts,
        &settings(Q2Model::Dipole { power: 2.0 }),
        Q2Units::GeV2,
    )
    .expect("fit converges");
    let r = f.radius_fm().expect("positive r^2");
    assert_abs_diff_eq!(r.central, 0.811, epsilon = 5e-4);
    assert_abs_diff_eq!(
        (12.0f64 / 0.71).sqrt() * HBARC_GEV_FM,
        0.811,
        epsilon = 5e-4
    );
    assert_eq!(f.n_failed, 0);
    assert_relative_eq!(f.params[1].central, 0.71, max_relative = 1e-3);
    // General exponent: r^2 = 6 p / M^2 for G0/(1+Q^2/M^2)^p (derivative at Q^2 = 0, analytic).
    let pts = noisy_points(&q2s, |q2| 1.3 / (1.0 + q2 / 0.5), 1e-5, 50, 2);
    let f = fit(
        &pts,
        &settings(Q2Model::Dipole { power: 1.0 }),
        Q2Units::GeV2,
    )
    .expect("fit converges");
    assert_relative_eq!(f.r2.central, 6.0 / 0.5, max_relative = 1e-3);
    assert_relative_eq!(f.g0.central, 1.3, max_relative = 1e-4);
}

// z-expansion (Hill & Paz, PRD 82 (2010) 113005): z(0) = 0 for t0 = 0; with
// t0_opt = t_cut (1 - sqrt(1 + Q2max/t_cut)), |z(0)| = |z(Q2max)| (analytic: the map is
// symmetric about the optimal t0).
#[test]
fn z_variable_properties() {
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    for _ in 0..20 {
        let t_cut = rng.gen_range(0.05..0.5);
        let q2_max = rng.gen_range(0.1..3.0);
        assert_abs_diff_eq!(z(0.0, t_cut, 0.0), 0.0, epsilon = 1e-15);
        let t0 = t0_optimal(t_cut, q2_max);
        assert_relative_eq!(
            z(0.0, t_cut, t0).abs(),
            z(q2_max, t_cut, t0).abs(),
            max_relative = 1e-12
        );
        assert!(z(0.0, t_cut, t0) < 0.0 && z(q2_max, t_cut, t0) > 0.0);
    }
}

// An exact polynomial in z is recovered by the z-expansion fit, and the radius equals the
// analytic r^2 = -6 a1 dz/dQ2(0) / a0 = -3 a1 / (2 a0 t_cut) for t0 = 0.
#[test]
fn z_expansion_recovers_polynomial_and_radius() {
    let t_cut = 4.0 * 0.14f64.powi(2);
    let a = [1.0, -1.8, 0.9, 0.4];
    let g = |q2: f64| {
        let zz = z(q2, t_cut, 0.0);
        a.iter().rev().fold(0.0, |acc, ak| acc * zz + ak)
    };
    let q2s: Vec<f64> = (1..=10).map(|i| 0.05 * i as f64).collect();
    let pts = noisy_points(&q2s, g, 1e-6, 40, 4);
    let model = Q2Model::ZExpansion {
        t_cut: TCut::Threshold {
            pion_mass: 0.14,
            n_pions: 2,
        },
        t0: T0::Zero,
        kmax: 3,
        prior: Some(ZPrior::Fixed(Prior::new(0.0, 100.0))),
        sum_rules: 0,
        pole_mass: None,
    };
    let f = fit(&pts, &settings(model), Q2Units::GeV2).expect("fit converges");
    assert_relative_eq!(f.g0.central, 1.0, max_relative = 1e-4);
    for k in 1..=3 {
        assert_relative_eq!(f.params[k].central, a[k] / a[0], max_relative = 1e-3);
    }
    assert_relative_eq!(
        f.r2.central,
        -3.0 * a[1] / (2.0 * a[0] * t_cut),
        max_relative = 1e-3
    );
    let fm2 = f.r2_fm2.as_ref().expect("GeV units").central;
    assert_relative_eq!(
        fm2,
        f.r2.central * HBARC_GEV_FM.powi(2),
        max_relative = 1e-12
    );
}

// With sum rules and the optimal t0 the fit still describes a dipole and its curve obeys the
// constraint G -> 0 faster at large Q^2; the radius of a dipole is reproduced within errors
// from 12/M^2 (common practice: z-expansion and dipole agree on dipole data).
#[test]
fn z_expansion_with_sum_rules_on_dipole_data() {
    let q2s: Vec<f64> = (1..=12).map(|i| 0.08 * i as f64).collect();
    let pts = noisy_points(&q2s, |q2| dipole(q2, 1.0, 0.71), 2e-3, 60, 5);
    let model = Q2Model::ZExpansion {
        t_cut: TCut::Value(4.0 * 0.14f64.powi(2)),
        t0: T0::Optimal,
        kmax: 8,
        prior: Some(ZPrior::Fixed(Prior::new(0.0, 5.0))),
        sum_rules: 4,
        pole_mass: None,
    };
    let mut s = settings(model);
    s.weights = Weighting::Full;
    let f = fit(&pts, &s, Q2Units::GeV2).expect("fit converges");
    let want = 12.0 / 0.71;
    let r2 = &f.r2;
    assert!(
        (r2.central - want).abs() < 3.0 * r2.error() + 0.05 * want,
        "{} +- {} vs {want}",
        r2.central,
        r2.error()
    );
    assert!(f.chi2_dof().expect("dof") < 3.0);
    // evaluate() reproduces the data
    for p in &pts {
        let g = f.evaluate(p.q2.central);
        assert!((g.central - p.value.central).abs() < 4.0 * p.value.error());
    }
}

// Invalid settings and data come back as errors, not panics.
#[test]
fn bad_input_is_an_error() {
    let pts = noisy_points(&[0.1, 0.2, 0.3], |q2| dipole(q2, 1.0, 0.71), 1e-3, 20, 6);
    let bad = Q2Model::ZExpansion {
        t_cut: TCut::Value(0.08),
        t0: T0::Zero,
        kmax: 2,
        prior: None,
        sum_rules: 3,
        pole_mass: None,
    };
    assert!(fit(&pts, &settings(bad), Q2Units::GeV2).is_err());
    assert!(fit(
        &[],
        &settings(Q2Model::Dipole { power: 2.0 }),
        Q2Units::GeV2
    )
    .is_err());
    let mut nan = pts.clone();
    nan[1].value.central = f64::NAN;
    assert!(fit(
        &nan,
        &settings(Q2Model::Dipole { power: 2.0 }),
        Q2Units::GeV2
    )
    .is_err());
    let yaml = "model: z-expansion\nt_cut: {pion_mass: 0.14, n_pions: 3}\nt0: optimal\nkmax: 4\nsum_rules: 2\nweights: full\n";
    let s: Q2FitSettings = serde_yaml_ng::from_str(yaml).expect("valid settings");
    assert!(matches!(
        s.model,
        Q2Model::ZExpansion {
            kmax: 4,
            sum_rules: 2,
            t0: T0::Optimal,
            ..
        }
    ));
    assert!(
        serde_yaml_ng::from_str::<Q2FitSettings>("model: dipole\npowr: 2\n").is_err(),
        "typo rejected"
    );
    assert!(
        serde_yaml_ng::from_str::<Q2FitSettings>("model: dipole\nwieghts: full\n").is_err(),
        "typo in an outer key rejected"
    );
    let s: Q2FitSettings = serde_yaml_ng::from_str("model: dipole\n").expect("defaults");
    assert!(matches!(s.model, Q2Model::Dipole { power } if (power - 2.0).abs() < 1e-15));
}

// Closure: synthetic ratios from known dipole GE, GM, GA and pion-pole GP (methods.md §5,
// both positive) with Gaussian per-configuration noise, decomposed per shell and fitted with a
// dipole: radii, G_M(0) and g_A come back within 2 sigma of the input.
#[test]
fn decomposition_and_dipole_closure() {
    let (n_cfg, l, m, a_fm) = (60, 24, 0.5, 0.09);
    let to_lat = (a_fm / HBARC_GEV_FM).powi(2);
    let (m2e, m2m, m2a) = (0.71 * to_lat, 0.75 * to_lat, 1.0 * to_lat);
    let (mu, ga, mpi) = (4.7, 1.27, 0.15);
    let truth = |ff: FormFactor, q2: f64| match ff {
        FormFactor::GE => dipole(q2, 1.0, m2e),
        FormFactor::GM => dipole(q2, mu, m2m),
        FormFactor::GA => dipole(q2, ga, m2a),
        FormFactor::GP => 4.0 * m * m * dipole(q2, ga, m2a) / (q2 + mpi * mpi),
        _ => 0.0,
    };
    let setup = KinematicSetup {
        hadron: Hadron::Spin1Half,
        l,
        twist_sink: [0.0; 3],
        twist_source: [0.0; 3],
        mass: Resampled::constant(m, n_cfg, Scheme::Jackknife),
        energies: Energies::Dispersion(Dispersion::Continuum),
        spacing_fm: Some(a_fm),
    };
    let plan = ResamplePlan::jackknife(n_cfg);
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let mut channels = Vec::new();
    let qs: Vec<Momentum> = (-2..=2)
        .flat_map(|x| (-2..=2).flat_map(move |y| (-2..=2).map(move |z| [x, y, z])))
        .filter(|q: &Momentum| q.iter().map(|c| c * c).sum::<i32>() <= 5)
        .collect();
    let currents = &Current::ALL[..8]; // V1..V4, A1..A4
    let sigma = 0.02;
    for &q in &qs {
        let pf = [0, 0, 0];
        let k = setup.on_shell(pf, q, None).expect("kinematics");
        let q2 = q_squared(&k);
        for &cur in currents {
            for proj in [
                Projector::Unpol,
                Projector::Pol(1),
                Projector::Pol(2),
                Projector::Pol(3),
            ] {
                let v: Complex<f64> = coefficients(Hadron::Spin1Half, proj, cur, &k)
                    .into_iter()
                    .map(|(ff, c)| c * truth(ff, q2))
                    .sum();
                let mut noisy = |x: f64| {
                    let cfg: Vec<f64> = (0..n_cfg).map(|_| x + sigma * normal(&mut rng)).collect();
                    plan.mean(&cfg)
                };
                channels.push(ChannelValue {
                    pf,
                    q,
                    current: cur,
                    projector: proj,
                    re: noisy(v.re),
                    im: noisy(v.im),
                });
            }
        }
    }
    let d = decompose(&channels, &setup, &DecompositionSettings::default())
        .expect("decomposition runs");
    let points = |ff: FormFactor| -> Vec<Q2Point> {
        d.shells
            .iter()
            .filter_map(|sh| {
                sh.form_factors
                    .iter()
                    .find(|(f, _)| *f == ff)
                    .map(|(_, g)| Q2Point {
                        q2: sh.q2.clone(),
                        value: g.clone(),
                    })
            })
            .collect()
    };
    let units = Q2Units::Lattice {
        spacing_fm: Some(a_fm),
    };
    let dip = settings(Q2Model::Dipole { power: 2.0 });
    let within = |name: &str, r: &Resampled, want: f64| {
        let pull = (r.central - want) / r.error();
        assert!(
            pull.abs() < 2.0,
            "{name}: {} +- {} vs {want} (pull {pull:.2})",
            r.central,
            r.error()
        );
    };
    let ge = fit(&points(FormFactor::GE), &dip, units).expect("GE fit");
    let gm = fit(&points(FormFactor::GM), &dip, units).expect("GM fit");
    let gaf = fit(&points(FormFactor::GA), &dip, units).expect("GA fit");
    assert!(points(FormFactor::GE).len() >= 5 && points(FormFactor::GM).len() >= 4);
    within(
        "r_E^2 [fm^2]",
        ge.r2_fm2.as_ref().expect("spacing"),
        12.0 / 0.71 * HBARC_GEV_FM.powi(2),
    );
    within(
        "r_M^2 [fm^2]",
        gm.r2_fm2.as_ref().expect("spacing"),
        12.0 / 0.75 * HBARC_GEV_FM.powi(2),
    );
    within("G_M(0)", &gm.g0, mu);
    within("g_A", &gaf.g0, ga);
    within(
        "r_A^2 [fm^2]",
        gaf.r2_fm2.as_ref().expect("spacing"),
        12.0 * HBARC_GEV_FM.powi(2),
    );
    // G_P per shell against the pion-pole input.
    for p in points(FormFactor::GP) {
        let want = truth(FormFactor::GP, p.q2.central);
        assert!(
            (p.value.central - want).abs() < 3.0 * p.value.error(),
            "GP at Q2={}",
            p.q2.central
        );
    }
    // Dirac/Pauli: kappa = mu - 1, and r_1^2 = r_E^2 - 6 kappa/(4 m^2) for G_E(0) = 1 (analytic).
    let mass = Resampled::constant(m, n_cfg, Scheme::Jackknife);
    let dp = dirac_pauli_radii(&ge, &gm, &mass).expect("same units");
    within("kappa", &dp.kappa, mu - 1.0);
    let r1_want = 12.0 / m2e - 6.0 * (mu - 1.0) / (4.0 * m * m);
    within("r_1^2 [lat]", &dp.r1_2, r1_want);
    let chi2: Vec<f64> = d.shells.iter().filter_map(|s| s.chi2_dof).collect();
    assert!(
        !chi2.is_empty() && chi2.iter().all(|c| *c < 4.0),
        "decomposition chi2/dof {chi2:?}"
    );
}

// The settings types produce a JSON Schema (for the pipeline's schema file) and parse YAML.
#[test]
fn settings_schemas() {
    let s =
        serde_json::to_string(&schemars::schema_for!(Q2FitSettings)).expect("schema serialises");
    assert!(s.contains("z-expansion") && s.contains("sum_rules"), "{s}");
    let s = serde_json::to_string(&schemars::schema_for!(DecompositionSettings))
        .expect("schema serialises");
    assert!(s.contains("q2_tolerance") && s.contains("phases"), "{s}");
    let d: DecompositionSettings =
        serde_yaml_ng::from_str("weights: shrinkage\nphases: {A4: i, V1: -1}\n")
            .expect("valid settings");
    assert_eq!(d.phases.len(), 2);
    let e: formfactory::kinematics::EnergySource =
        serde_yaml_ng::from_str("lattice").expect("valid");
    assert_eq!(e, formfactory::kinematics::EnergySource::Lattice);
}

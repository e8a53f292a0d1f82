//! Integration tests: ratio.
//!
//! Every check runs on synthetic correlators built here from a stated parametrisation
//! (methods.md §3, §4), so the expected answers are analytic: the ratio of single-state data is
//! the matrix element at every insertion time; the two-state form of methods.md §4 is exact for
//! two-state data; the summation slope of two-state data has a bias given in closed form below.

use approx::assert_relative_eq;
use formfactory::data::{
    Current, Momentum, Projector, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use formfactory::ratio::crosscheck::{difference, Flag};
use formfactory::ratio::Estimator;
use formfactory::ratio::{
    analyse_channel, average, build_ratios, plateau, summation, two_state, ChannelKey,
    ChannelRatio, NegativeRootPolicy, RatioSettings, TwoPointStates, TwoStateVariant,
};
use formfactory::resample::{ResamplePlan, Resampled};
use formfactory::Error;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;

/// Two-point parameters: `C2(t) = A0 e^{-E0 t} (1 + a e^{-Delta t})`.
#[derive(Clone, Copy)]
struct TwoPt {
    a0: f64,
    e0: f64,
    a: f64,
    delta: f64,
}

impl TwoPt {
    fn at(&self, t: f64) -> f64 {
        self.a0 * (-self.e0 * t).exp() * (1.0 + self.a * (-self.delta * t).exp())
    }
}

/// A three-point channel: ground-state matrix element `m = (re, im)` and relative
/// excited-state coefficients `b` of methods.md §4.
#[derive(Clone, Copy)]
struct Chan {
    pf: Momentum,
    q: Momentum,
    m: (f64, f64),
    b_i: f64,
    b_f: f64,
    b_if: f64,
}

impl Chan {
    fn source_momentum(&self) -> Momentum {
        [
            self.pf[0] - self.q[0],
            self.pf[1] - self.q[1],
            self.pf[2] - self.q[2],
        ]
    }

    fn key(&self, tsep: u32) -> ThreePointKey {
        ThreePointKey {
            tsep,
            pf: self.pf,
            q: self.q,
            current: Current::V4,
            projector: Projector::Unpol,
            flavor: None,
            diagram: None,
            ops: None,
        }
    }

    /// `C3 = sqrt(A_f A_i) e^{-E_f (tsep - tau)} e^{-E_i tau} M (1 + b_i e^{..} + b_f e^{..} + b_if e^{..})`,
    /// returned as the real factor multiplying `M`.
    fn factor(&self, f: &TwoPt, i: &TwoPt, tsep: f64, tau: f64) -> f64 {
        let ei = (-i.delta * tau).exp();
        let ef = (-f.delta * (tsep - tau)).exp();
        (f.a0 * i.a0).sqrt()
            * (-f.e0 * (tsep - tau) - i.e0 * tau).exp()
            * (1.0 + self.b_i * ei + self.b_f * ef + self.b_if * ei * ef)
    }
}

/// How per-configuration values scatter around the exact correlators.
#[derive(Clone, Copy)]
enum Noise {
    /// Relative jitter `±eps * u` in antithetic pairs of configurations: the mean over the
    /// ensemble is the exact value (to rounding), the samples are not.
    Antithetic(f64),
    /// Seeded Gaussian relative noise `rel * e^{0.05 t}` per time slice plus a common
    /// per-configuration factor shared by every correlator (correlates C3 with C2).
    Gaussian { seed: u64, rel: f64 },
}

fn gauss(rng: &mut ChaCha8Rng) -> f64 {
    // Box–Muller (textbook).
    let u1: f64 = rng.gen_range(f64::EPSILON..1.0);
    let u2: f64 = rng.gen::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

/// Per-configuration relative factors `(1 + noise)` for `n_t` times, time-major.
fn factors(
    noise: Noise,
    rng: &mut ChaCha8Rng,
    common: &[f64],
    n_t: usize,
    n_cfg: usize,
) -> Vec<f64> {
    let mut out = vec![1.0; n_t * n_cfg];
    for t in 0..n_t {
        let row = &mut out[t * n_cfg..(t + 1) * n_cfg];
        match noise {
            Noise::Antithetic(eps) => {
                let half = n_cfg / 2;
                for c in 0..half {
                    let u = rng.gen_range(-1.0..1.0);
                    row[c] = 1.0 + eps * u;
                    row[c + half] = 1.0 - eps * u;
                }
            }
            Noise::Gaussian { rel, .. } => {
                for (c, v) in row.iter_mut().enumerate() {
                    *v = 1.0 + common[c] + rel * (0.05 * t as f64).exp() * gauss(rng);
                }
            }
        }
    }
    out
}

fn make_data(
    twopt: &BTreeMap<Momentum, TwoPt>,
    chans: &[Chan],
    tseps: &[u32],
    n_t2: usize,
    n_cfg: usize,
    noise: Noise,
) -> (TwoPointData, ThreePointData) {
    let seed = match noise {
        Noise::Gaussian { seed, .. } => seed,
        Noise::Antithetic(_) => 0,
    };
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let common: Vec<f64> = (0..n_cfg)
        .map(|_| match noise {
            Noise::Gaussian { rel, .. } => 0.5 * rel * gauss(&mut rng),
            Noise::Antithetic(_) => 0.0,
        })
        .collect();
    let configs: Vec<i64> = (0..n_cfg as i64).collect();
    let mut c2 = TwoPointData {
        configs: configs.clone(),
        channels: BTreeMap::new(),
    };
    for (p, s) in twopt {
        let f = factors(noise, &mut rng, &common, n_t2, n_cfg);
        let mut series = Series::zeros(n_t2, n_cfg);
        for t in 0..n_t2 {
            for c in 0..n_cfg {
                series.re[t * n_cfg + c] = s.at(t as f64) * f[t * n_cfg + c];
            }
        }
        c2.channels.insert(
            TwoPointKey {
                momentum: *p,
                smear: None,
                ops: None,
            },
            series,
        );
    }
    let mut c3 = ThreePointData {
        configs,
        channels: BTreeMap::new(),
    };
    for ch in chans {
        let (sf, si) = (&twopt[&ch.pf], &twopt[&ch.source_momentum()]);
        for &tsep in tseps {
            let n_t = tsep as usize + 1;
            let f = factors(noise, &mut rng, &common, n_t, n_cfg);
            let f_im = factors(noise, &mut rng, &common, n_t, n_cfg);
            let mut series = Series::zeros(n_t, n_cfg);
            for tau in 0..n_t {
                let g = ch.factor(sf, si, tsep as f64, tau as f64);
                for c in 0..n_cfg {
                    let i = tau * n_cfg + c;
                    series.re[i] = g * ch.m.0 * f[i];
                    series.im[i] = g * ch.m.1 * f_im[i];
                }
            }
            c3.channels.insert(ch.key(tsep), series);
        }
    }
    (c2, c3)
}

/// Two-point excited-state parameters as exact resampled numbers (what a precise spectrum
/// stage would deliver).
fn states_of(
    twopt: &BTreeMap<Momentum, TwoPt>,
    plan: &ResamplePlan,
) -> BTreeMap<Momentum, TwoPointStates> {
    let c = |x: f64| Resampled::constant(x, plan.n_samples(), plan.scheme());
    twopt
        .iter()
        .map(|(p, s)| {
            (
                *p,
                TwoPointStates {
                    energy: c(s.e0),
                    amp_ratio: c(s.a),
                    gap: c(s.delta),
                },
            )
        })
        .collect()
}

fn analysis_message(e: Error) -> String {
    match e {
        Error::Analysis { stage, message } => {
            assert_eq!(stage, "ratio");
            message
        }
        other => panic!("expected an analysis error, got {other}"),
    }
}

const P0: Momentum = [0, 0, 0];
const PX: Momentum = [1, 0, 0];
const MX: Momentum = [-1, 0, 0];

fn single_state_setup() -> (BTreeMap<Momentum, TwoPt>, Vec<Chan>) {
    let twopt = BTreeMap::from([
        (
            P0,
            TwoPt {
                a0: 2.0,
                e0: 0.5,
                a: 0.0,
                delta: 0.4,
            },
        ),
        (
            MX,
            TwoPt {
                a0: 1.5,
                e0: 0.6,
                a: 0.0,
                delta: 0.4,
            },
        ),
    ]);
    let chans = vec![
        Chan {
            pf: P0,
            q: PX,
            m: (0.7, -0.3),
            b_i: 0.0,
            b_f: 0.0,
            b_if: 0.0,
        },
        Chan {
            pf: P0,
            q: P0,
            m: (1.2, 0.25),
            b_i: 0.0,
            b_f: 0.0,
            b_if: 0.0,
        },
    ];
    (twopt, chans)
}

#[test]
fn single_state_ratio_is_the_matrix_element_everywhere() {
    // Analytic: for C2 = A e^{-E t} and C3 = sqrt(A_f A_i) e^{-E_f (tsep-tau)} e^{-E_i tau} Pi the
    // ratio of methods.md §3 equals Pi at every tau (all exponentials and overlaps cancel).
    let (twopt, chans) = single_state_setup();
    let n_cfg = 64;
    let (c2, c3) = make_data(
        &twopt,
        &chans,
        &[6, 8, 10],
        16,
        n_cfg,
        Noise::Antithetic(1e-7),
    );
    let plan = ResamplePlan::jackknife(n_cfg);
    let settings = RatioSettings::default();
    let ratios = build_ratios(&c3, &c2, &plan, &settings).unwrap();
    assert_eq!(ratios.len(), 2);
    let states = states_of(&twopt, &plan);
    for ch in &chans {
        let key = ChannelKey::of(&ch.key(6));
        let ratio = &ratios[&key];
        assert_eq!(ratio.points.len(), 7 + 9 + 11);
        assert_eq!(ratio.negative_root.samples, 0);
        for p in &ratio.points {
            assert_relative_eq!(p.value.re.central, ch.m.0, max_relative = 1e-10);
            assert_relative_eq!(p.value.im.central, ch.m.1, max_relative = 1e-10);
        }
        let late_settings = RatioSettings {
            two_state_late: true,
            ..settings.clone()
        };
        let result = analyse_channel(ratio.clone(), &states, &late_settings).unwrap();
        assert_eq!(result.plateaus.len(), 3);
        // The late two-state fit (made by default) drops the smallest of the three
        // separations; with the setting off it is not made.
        let off = RatioSettings {
            two_state_late: false,
            ..settings.clone()
        };
        let plain = analyse_channel(ratio.clone(), &states, &off).unwrap();
        assert!(plain.two_state_late.is_none());
        let late = result.two_state_late.as_ref().unwrap();
        assert_eq!(result.two_state.as_ref().unwrap().tseps, vec![6, 8, 10]);
        assert_eq!(late.tseps, vec![8, 10]);
        assert_eq!(late.n_points, 7 + 9); // tau_cut 1: tau 1..tsep-1
        let mut estimates = vec![
            result.summation.as_ref().unwrap().slope.value.clone(),
            result.two_state.as_ref().unwrap().m.value.clone(),
            late.m.value.clone(),
            result.final_estimate.clone(),
        ];
        estimates.extend(result.plateaus.iter().map(|p| p.fit.value.clone()));
        for e in estimates {
            assert_relative_eq!(e.re.central, ch.m.0, max_relative = 1e-10);
            assert_relative_eq!(e.im.central, ch.m.1, max_relative = 1e-10);
        }
        assert!(result.notes.is_empty(), "{:?}", result.notes);
    }
}

/// Two-state truth shared by the noise-free and closure tests: a moving source (`p_i != p_f`)
/// and a forward channel (`p_i = p_f`, `b_i = b_f`).
fn two_state_setup() -> (BTreeMap<Momentum, TwoPt>, Vec<Chan>) {
    let twopt = BTreeMap::from([
        (
            P0,
            TwoPt {
                a0: 2.0,
                e0: 0.45,
                a: 0.8,
                delta: 0.35,
            },
        ),
        (
            MX,
            TwoPt {
                a0: 1.5,
                e0: 0.55,
                a: 0.6,
                delta: 0.4,
            },
        ),
    ]);
    let chans = vec![
        Chan {
            pf: P0,
            q: PX,
            m: (0.9, -0.4),
            b_i: 0.5,
            b_f: 0.3,
            b_if: 0.2,
        },
        Chan {
            pf: P0,
            q: P0,
            m: (1.2, 0.3),
            b_i: 0.45,
            b_f: 0.45,
            b_if: 0.25,
        },
    ];
    (twopt, chans)
}

#[test]
fn two_state_fit_recovers_the_matrix_element_and_summation_bias_is_analytic() {
    let (twopt, chans) = two_state_setup();
    let n_cfg = 160; // antithetic pairs: 80 independent directions for up to 52 points
    let tseps = [6, 10];
    let (c2, c3) = make_data(&twopt, &chans, &tseps, 16, n_cfg, Noise::Antithetic(1e-7));
    let plan = ResamplePlan::jackknife(n_cfg);
    let settings = RatioSettings::default();
    let states = states_of(&twopt, &plan);
    let ratios = build_ratios(&c3, &c2, &plan, &settings).unwrap();
    let mut jittered = states.clone();
    for st in jittered.values_mut() {
        let n = st.gap.len();
        let spread = |j: usize| if j < n / 2 { 1e-3 } else { -1e-3 } * (1.0 + (j % 7) as f64);
        st.gap.samples = (0..n).map(|j| st.gap.central + spread(j)).collect();
    }
    let mut off = states.clone();
    for st in off.values_mut() {
        st.energy = &st.energy + 0.02;
        st.amp_ratio = &st.amp_ratio * 1.3;
        st.gap = &st.gap - 0.05;
    }
    // The drawn curve of an exact fit passes through every exact ratio point (the model
    // of methods.md §4 evaluated at the central fit).
    let curve_matches = |fit: &two_state::TwoStateFit, ratio: &formfactory::ratio::ChannelRatio| {
        for p in &ratio.points {
            let (re, im) = fit.curve(p.tsep as f64, p.tau as f64);
            assert_relative_eq!(re, p.value.re.central, max_relative = 1e-6, epsilon = 1e-9);
            assert_relative_eq!(im, p.value.im.central, max_relative = 1e-6, epsilon = 1e-9);
        }
    };
    for ch in &chans {
        let ratio = ratios[&ChannelKey::of(&ch.key(6))].clone();
        let fit = two_state::two_state(&ratio, &states, &settings).unwrap();
        curve_matches(&fit, &ratio);
        // Exact data follow the two-state form of methods.md §4 exactly.
        assert_relative_eq!(fit.m.value.re.central, ch.m.0, max_relative = 1e-8);
        assert_relative_eq!(fit.m.value.im.central, ch.m.1, max_relative = 1e-8);
        assert_relative_eq!(fit.c_i.re.central, ch.m.0 * ch.b_i, max_relative = 1e-6);
        assert_relative_eq!(fit.c_if.re.central, ch.m.0 * ch.b_if, max_relative = 1e-6);
        assert_eq!(fit.symmetric, ch.pf == ch.source_momentum());
        // Floating gaps with priors centred on the true gaps (spread on the samples only): the
        // exact data are fitted exactly, gaps included.
        let floating = RatioSettings {
            two_state: TwoStateVariant::FloatingGaps {
                prior_width_factor: 1.0,
            },
            ..RatioSettings::default()
        };
        let fit = two_state::two_state(&ratio, &jittered, &floating).unwrap();
        curve_matches(&fit, &ratio);
        assert_relative_eq!(fit.m.value.re.central, ch.m.0, max_relative = 1e-8);
        assert_relative_eq!(fit.m.value.im.central, ch.m.1, max_relative = 1e-8);
        let gaps = fit.gaps.unwrap();
        assert_relative_eq!(
            gaps.source.central,
            twopt[&ch.source_momentum()].delta,
            max_relative = 1e-8
        );
        assert_relative_eq!(gaps.sink.central, twopt[&ch.pf].delta, max_relative = 1e-8);
        assert!(fit.m.quality_re.chi2 < 1e-12);
        // Joint fit with the two-point functions, started from deliberately wrong two-point
        // parameters: the exact C2 data pin the gaps, so the truth is found again.
        let joint = RatioSettings {
            two_state: TwoStateVariant::JointWithTwoPoint {
                t_min: 1,
                t_max: 12,
            },
            ..RatioSettings::default()
        };
        let fit = two_state::two_state(&ratio, &off, &joint).unwrap();
        curve_matches(&fit, &ratio);
        assert_relative_eq!(fit.m.value.re.central, ch.m.0, max_relative = 1e-8);
        assert_relative_eq!(fit.m.value.im.central, ch.m.1, max_relative = 1e-8);
        let gaps = fit.gaps.unwrap();
        assert_relative_eq!(
            gaps.source.central,
            twopt[&ch.source_momentum()].delta,
            max_relative = 1e-7
        );
        assert_relative_eq!(gaps.sink.central, twopt[&ch.pf].delta, max_relative = 1e-7);
        // The plateau is biased by the excited states (sanity: the data are contaminated).
        let p6 = plateau::plateau(&ratio, 6, &settings).unwrap();
        assert!((p6.fit.value.re.central - ch.m.0).abs() > 0.05 * ch.m.0);
    }
    // Summation bias for the forward channel (p_f = p_i, a, Delta, b = b_i = b_f, b_if):
    // R(T, tau) = [M + c (e^{-D tau} + e^{-D (T - tau)}) + c_if e^{-D T}] / (1 + a e^{-D T}),
    // c = M b, c_if = M b_if (methods.md §4 with F2 = 1/(1 + a e^{-D T}) for p_f = p_i). Summing
    // over tau = k..T-k (k = tau_cut, n(T) = T - 2k + 1 terms), both exponentials give the same
    // geometric sum G(T) = (e^{-D k} - e^{-D (T - k + 1)}) / (1 - e^{-D}), so
    // S(T) = [n(T) (M + c_if e^{-D T}) + 2 c G(T)] / (1 + a e^{-D T}),
    // and with two separations the fitted line passes through both points:
    // slope = (S(T2) - S(T1)) / (T2 - T1); its bias is slope - M.
    let ch = &chans[1];
    let s = twopt[&P0];
    let k = settings.tau_cut as f64;
    let sum = |t: f64, m: f64| {
        let d = s.delta;
        let g = ((-d * k).exp() - (-d * (t - k + 1.0)).exp()) / (1.0 - (-d).exp());
        let n = t - 2.0 * k + 1.0;
        (n * (m + m * ch.b_if * (-d * t).exp()) + 2.0 * m * ch.b_i * g)
            / (1.0 + s.a * (-d * t).exp())
    };
    let (t1, t2) = (tseps[0] as f64, tseps[1] as f64);
    let expected = (sum(t2, ch.m.0) - sum(t1, ch.m.0)) / (t2 - t1);
    let ratio = &ratios[&ChannelKey::of(&ch.key(6))];
    let fit = summation::summation(ratio, &settings).unwrap();
    assert_relative_eq!(fit.slope.value.re.central, expected, max_relative = 1e-10);
    let bias = expected - ch.m.0;
    assert!(bias.abs() > 1e-3 * ch.m.0, "the bias is visible: {bias}");
    assert_relative_eq!(
        fit.sums[0].re.central,
        sum(t1, ch.m.0),
        max_relative = 1e-10
    );
}

#[test]
fn closure_with_strong_contamination() {
    // Six channels at p_f = 0 with source momenta 0 and the six unit vectors' negatives share
    // one two-point spectrum per |p|; strong contamination (b about 0.5, Delta = 0.35).
    let e = |n2: f64| (0.45f64.powi(2) + n2 * (2.0 * std::f64::consts::PI / 24.0).powi(2)).sqrt();
    let units: [Momentum; 6] = [
        [1, 0, 0],
        [0, 1, 0],
        [0, 0, 1],
        [-1, 0, 0],
        [0, -1, 0],
        [0, 0, -1],
    ];
    let mut twopt = BTreeMap::from([(
        P0,
        TwoPt {
            a0: 2.0,
            e0: e(0.0),
            a: 0.7,
            delta: 0.6,
        },
    )]);
    let mut chans = vec![Chan {
        pf: P0,
        q: P0,
        m: (1.1, 0.2),
        b_i: 0.5,
        b_f: 0.5,
        b_if: 0.3,
    }];
    for (k, u) in units.iter().enumerate() {
        let pi = [-u[0], -u[1], -u[2]];
        twopt.insert(
            pi,
            TwoPt {
                a0: 1.6,
                e0: e(1.0),
                a: 0.6,
                delta: 0.65,
            },
        );
        if k < 5 {
            let kf = k as f64;
            chans.push(Chan {
                pf: P0,
                q: *u,
                m: (0.8 + 0.05 * kf, -0.2 + 0.1 * kf),
                b_i: 0.55,
                b_f: 0.4,
                b_if: 0.2,
            });
        }
    }
    let n_cfg = 300;
    let tseps = [4, 6, 8, 10, 12];
    let (c2, c3) = make_data(
        &twopt,
        &chans,
        &tseps,
        16,
        n_cfg,
        Noise::Gaussian {
            seed: 2026,
            rel: 0.25,
        },
    );
    let plan = ResamplePlan::jackknife(n_cfg);
    let settings = RatioSettings {
        summation_tsep_min: 6,
        ..RatioSettings::default()
    };
    let states = states_of(&twopt, &plan);
    let ratios = build_ratios(&c3, &c2, &plan, &settings).unwrap();
    // Gaps as a two-point stage would measure them: per-configuration truth + noise, resampled
    // with the same plan (error about 0.2 / sqrt(300) = 0.012), for the floating-gap variant.
    let mut rng = ChaCha8Rng::seed_from_u64(77);
    let mut measured = states.clone();
    for (p, st) in measured.iter_mut() {
        let x: Vec<f64> = (0..n_cfg)
            .map(|_| twopt[p].delta + 0.2 * gauss(&mut rng))
            .collect();
        st.gap = plan.mean(&x);
    }
    // The non-linear variants on fewer points (tau_cut 2, tsep >= 6) to keep the test quick.
    let floating = RatioSettings {
        two_state: TwoStateVariant::FloatingGaps {
            prior_width_factor: 1.0,
        },
        tau_cut: 2,
        two_state_tsep_min: 6,
        ..settings.clone()
    };
    let joint = RatioSettings {
        two_state: TwoStateVariant::JointWithTwoPoint {
            t_min: 2,
            t_max: 10,
        },
        ..floating.clone()
    };
    let (mut two_ok, mut sum_ok, mut plateau_off, mut flag_agrees) = (0, 0, 0, 0);
    let (mut float_ok, mut joint_ok) = (0, 0);
    let nonlinear_channel = |ch: &Chan| ch.q[0] + ch.q[1] + ch.q[2] >= 0 && ch.q[2] == 0;
    for ch in &chans {
        let ratio = ratios[&ChannelKey::of(&ch.key(4))].clone();
        // The non-linear variants on every other channel (time).
        if nonlinear_channel(ch) {
            let fl = two_state::two_state(&ratio, &measured, &floating).unwrap();
            let jt = two_state::two_state(&ratio, &measured, &joint).unwrap();
            for (name, fit, ok) in [
                ("floating gaps", &fl, &mut float_ok),
                ("joint", &jt, &mut joint_ok),
            ] {
                let pull = (fit.m.value.re.central - ch.m.0).abs() / fit.m.value.re.error();
                println!("{name}: pull {pull:.2}");
                assert!(pull < 3.0, "{name}: pull {pull}");
                *ok += usize::from(pull < 1.0);
            }
        }
        let r = analyse_channel(ratio, &states, &settings).unwrap();
        let pull = |v: &Resampled, truth: f64| (v.central - truth).abs() / v.error();
        let ts = &r.two_state.as_ref().unwrap().m.value;
        let sm = &r.summation.as_ref().unwrap().slope.value;
        let p4 = &r.plateaus[0].fit.value;
        assert_eq!(r.plateaus[0].tsep, 4);
        assert!(pull(&ts.re, ch.m.0) < 3.0 && pull(&sm.re, ch.m.0) < 3.0);
        two_ok += usize::from(pull(&ts.re, ch.m.0) < 1.0);
        sum_ok += usize::from(pull(&sm.re, ch.m.0) < 1.0);
        let off = pull(&p4.re, ch.m.0) > 2.0;
        plateau_off += usize::from(off);
        let row = r
            .crosscheck
            .iter()
            .find(|row| {
                row.method == Estimator::plateau_at(4) && row.reference == Estimator::TwoState
            })
            .unwrap();
        let flagged = row.re.sigma > 2.0;
        assert_eq!(
            row.flag >= Flag::Above2Sigma,
            row.re.sigma > 2.0 || row.im.sigma > 2.0
        );
        flag_agrees += usize::from(flagged == off);
        println!(
            "{}: two-state pull {:.2}, summation pull {:.2}, plateau(4) pull {:.2}, cross-check sigma {:.2}",
            r.key,
            pull(&ts.re, ch.m.0),
            pull(&sm.re, ch.m.0),
            pull(&p4.re, ch.m.0),
            row.re.sigma
        );
    }
    let n = chans.len();
    let n_nl = chans.iter().filter(|c| nonlinear_channel(c)).count();
    assert_eq!(n_nl, 3);
    assert!(
        two_ok * 3 >= n * 2,
        "two-state within 1 sigma in {two_ok} of {n}"
    );
    assert!(
        sum_ok * 3 >= n * 2,
        "summation within 1 sigma in {sum_ok} of {n}"
    );
    assert!(
        float_ok * 3 >= n_nl * 2,
        "floating gaps within 1 sigma in {float_ok} of {n_nl}"
    );
    assert!(
        joint_ok * 3 >= n_nl * 2,
        "joint fit within 1 sigma in {joint_ok} of {n_nl}"
    );
    assert!(
        plateau_off * 3 >= n * 2,
        "plateau(4) off by 2 sigma in {plateau_off} of {n}"
    );
    assert_eq!(
        flag_agrees, n,
        "the cross-check flags exactly the plateaus that are off"
    );
}

#[test]
fn correlated_difference_has_small_error() {
    // Two estimates sharing most of their fluctuation: the error of the difference from the
    // resamples of the difference is far below the quadrature sum (basic statistics: Var(a-b) =
    // Var a + Var b - 2 Cov(a, b)).
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    let n = 200;
    let x: Vec<f64> = (0..n).map(|_| gauss(&mut rng)).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|v| v + 0.05 * gauss(&mut rng) + 0.01)
        .collect();
    let plan = ResamplePlan::bootstrap(n, 400, 5);
    let (a, b) = (plan.mean(&x), plan.mean(&y));
    let d = difference(&a, &b);
    let quadrature = a.error().hypot(b.error());
    assert!(d.error < 0.1 * quadrature, "{} vs {}", d.error, quadrature);
    // Expected error of the difference: 0.05 / sqrt(n) (independent part only).
    assert_relative_eq!(d.error, 0.05 / (n as f64).sqrt(), max_relative = 0.25);
    assert_relative_eq!(
        d.sigma,
        d.value.central.abs() / d.error,
        max_relative = 1e-12
    );
    // Flag thresholds of methods.md §4: above 1 and above 2 standard deviations.
    assert_eq!(Flag::of(0.99), Flag::Consistent);
    assert_eq!(Flag::of(1.5), Flag::Above1Sigma);
    assert_eq!(Flag::of(2.01), Flag::Above2Sigma);
}

fn one_channel_data(tseps: &[u32]) -> (TwoPointData, ThreePointData, ResamplePlan) {
    let (twopt, chans) = single_state_setup();
    let (c2, c3) = make_data(&twopt, &chans[..1], tseps, 16, 32, Noise::Antithetic(1e-3));
    (c2, c3, ResamplePlan::jackknife(32))
}

#[test]
fn tau_outside_the_separation_is_an_error() {
    let (c2, mut c3, plan) = one_channel_data(&[6]);
    let series = c3.channels.values_mut().next().unwrap();
    *series = Series::zeros(9, 32); // tau = 0..=8 for tsep 6
    let err = build_ratios(&c3, &c2, &plan, &RatioSettings::default()).unwrap_err();
    let msg = analysis_message(err);
    assert!(
        msg.contains("tsep 6") && msg.contains("tau outside [0, tsep]"),
        "{msg}"
    );
}

#[test]
fn missing_two_point_momentum_is_an_error() {
    let (mut c2, c3, plan) = one_channel_data(&[6]);
    c2.channels.retain(|k, _| k.momentum != MX);
    let msg =
        analysis_message(build_ratios(&c3, &c2, &plan, &RatioSettings::default()).unwrap_err());
    assert!(msg.contains("(-1,0,0)") && msg.contains("V4"), "{msg}");
}

#[test]
fn summation_with_one_separation_is_an_error() {
    let (c2, c3, plan) = one_channel_data(&[8]);
    let settings = RatioSettings::default();
    let ratio = build_ratios(&c3, &c2, &plan, &settings)
        .unwrap()
        .into_values()
        .next()
        .unwrap();
    let msg = analysis_message(summation::summation(&ratio, &settings).unwrap_err());
    assert!(msg.contains("at least two"), "{msg}");
    // The channel analysis still runs (plateau as final method), noting the skipped methods.
    let s = RatioSettings {
        final_method: Estimator::Plateau { tsep: None },
        ..settings.clone()
    };
    let r = analyse_channel(ratio.clone(), &BTreeMap::new(), &s).unwrap();
    assert_eq!(r.notes.len(), 2, "{:?}", r.notes);
    assert!(r.summation.is_none() && r.two_state.is_none());
    // With the two-state fit as final method (the default) the channel does not stop the run:
    // the plateau stands in for its final estimate, and a note says so.
    assert_eq!(settings.final_method, Estimator::TwoState);
    let r = analyse_channel(ratio, &BTreeMap::new(), &settings).unwrap();
    assert_eq!(r.final_method, Estimator::plateau_at(8));
    assert_eq!(r.final_estimate, r.plateaus[0].fit.value);
    assert_eq!(r.notes.len(), 3, "{:?}", r.notes);
    assert!(
        r.notes[2].contains("`two_state` could not run") && r.notes[2].contains("plateau"),
        "{:?}",
        r.notes
    );
}

#[test]
fn tau_cut_that_leaves_no_points_is_an_error() {
    let (c2, c3, plan) = one_channel_data(&[4, 6]);
    let settings = RatioSettings {
        tau_cut: 4,
        ..RatioSettings::default()
    };
    let ratio = build_ratios(&c3, &c2, &plan, &settings)
        .unwrap()
        .into_values()
        .next()
        .unwrap();
    let msg = analysis_message(plateau::plateau(&ratio, 6, &settings).unwrap_err());
    assert!(
        msg.contains("no ratio points") && msg.contains("tsep 6"),
        "{msg}"
    );
    let msg = analysis_message(analyse_channel(ratio, &BTreeMap::new(), &settings).unwrap_err());
    assert!(msg.contains("no excited-state method could run"), "{msg}");
}

#[test]
fn negative_product_under_the_root_is_counted_never_nan() {
    // Flip the sign of C2 at p_i, t = 2 on every configuration: the product under the root is
    // negative wherever it involves that time slice.
    let (mut c2, c3, plan) = one_channel_data(&[6]);
    let series = c2
        .channels
        .iter_mut()
        .find(|(k, _)| k.momentum == MX)
        .unwrap()
        .1;
    let n = series.n_cfg;
    for v in &mut series.re[2 * n..3 * n] {
        *v = -*v;
    }
    let abs = build_ratios(&c3, &c2, &plan, &RatioSettings::default()).unwrap();
    let r: &ChannelRatio = abs.values().next().unwrap();
    // tau = 2 (C2_i(tau)) and tau = 4 (C2_i(tsep - tau)) are affected, each on 1 + 32 values.
    assert_eq!(r.negative_root.points_affected, 2);
    assert_eq!(r.negative_root.samples, 2 * 33);
    assert_eq!(r.negative_root.points_dropped, 0);
    assert!(r
        .points
        .iter()
        .all(|p| p.value.re.is_finite() && p.value.im.is_finite()));
    let drop = RatioSettings {
        negative_root: NegativeRootPolicy::DropPoint,
        ..RatioSettings::default()
    };
    let dropped = build_ratios(&c3, &c2, &plan, &drop).unwrap();
    let r = dropped.values().next().unwrap();
    assert_eq!(r.negative_root.points_dropped, 2);
    assert_eq!(r.points.len(), 5);
    assert!(r.points.iter().all(|p| p.tau != 2 && p.tau != 4));
}

#[test]
fn averaging_equivalent_channels_with_signs() {
    // Two channels with opposite matrix elements averaged with signs (+1, -1) give the first
    // one's matrix element exactly.
    let (twopt, _) = single_state_setup();
    let chans = [
        Chan {
            pf: P0,
            q: PX,
            m: (0.7, -0.3),
            b_i: 0.0,
            b_f: 0.0,
            b_if: 0.0,
        },
        Chan {
            pf: PX,
            q: PX,
            m: (-0.7, 0.3),
            b_i: 0.0,
            b_f: 0.0,
            b_if: 0.0,
        },
    ];
    let mut twopt = twopt;
    twopt.insert(
        PX,
        TwoPt {
            a0: 1.5,
            e0: 0.6,
            a: 0.0,
            delta: 0.4,
        },
    );
    let (c2, c3) = make_data(&twopt, &chans, &[6], 16, 32, Noise::Antithetic(1e-6));
    let plan = ResamplePlan::jackknife(32);
    let ratios = build_ratios(&c3, &c2, &plan, &RatioSettings::default()).unwrap();
    let group = vec![
        (ChannelKey::of(&chans[0].key(6)), 1.0),
        (ChannelKey::of(&chans[1].key(6)), -1.0),
    ];
    let avg = average::average_channels(&ratios, &group).unwrap();
    assert_eq!(avg.key, group[0].0);
    for p in &avg.points {
        assert_relative_eq!(p.value.re.central, 0.7, max_relative = 1e-10);
        assert_relative_eq!(p.value.im.central, -0.3, max_relative = 1e-10);
    }
    let other_current = ThreePointKey {
        current: Current::V1,
        ..chans[0].key(6)
    };
    let missing = vec![
        (ChannelKey::of(&chans[0].key(6)), 1.0),
        (ChannelKey::of(&other_current), 1.0),
    ];
    let msg = analysis_message(average::average_channels(&ratios, &missing).unwrap_err());
    assert!(msg.contains("V1"), "{msg}");
}

#[test]
fn renormalization_keeps_the_z_error_as_its_own_column() {
    // Independent errors add in quadrature (common practice; methods.md §4): for bare value b
    // with error s and Z +- dZ, stat = |Z| s, z-error = |b| dZ, total = sqrt(stat^2 + z^2).
    use formfactory::kinematics::renorm::{renormalize, ZFactor, ZFactors};
    let mut rng = ChaCha8Rng::seed_from_u64(3);
    let x: Vec<f64> = (0..100).map(|_| 1.27 + 0.1 * gauss(&mut rng)).collect();
    let bare = ResamplePlan::jackknife(100).mean(&x);
    let z = ZFactor {
        value: 0.9,
        error: 0.02,
    };
    let r = renormalize(&bare, z);
    assert_relative_eq!(r.value.central, 0.9 * bare.central, max_relative = 1e-14);
    assert_relative_eq!(r.error_stat, 0.9 * bare.error(), max_relative = 1e-12);
    assert_relative_eq!(r.error_z, 0.02 * bare.central, max_relative = 1e-14);
    assert_relative_eq!(
        r.error_total,
        (r.error_stat.powi(2) + r.error_z.powi(2)).sqrt(),
        max_relative = 1e-14
    );
    let zs = ZFactors {
        axial: Some(z),
        ..ZFactors::default()
    };
    assert_eq!(zs.get(formfactory::data::CurrentKind::Axial), z);
    assert_eq!(zs.get(formfactory::data::CurrentKind::Vector), ZFactor::ONE);
    // Applied to a channel's final estimate through its current (V4: vector, Z_V = 0.7 +- 0.01).
    let (twopt, chans) = single_state_setup();
    let (c2, c3) = make_data(
        &twopt,
        &chans[..1],
        &[6, 8],
        16,
        32,
        Noise::Antithetic(1e-6),
    );
    let plan = ResamplePlan::jackknife(32);
    let settings = RatioSettings::default();
    let ratio = build_ratios(&c3, &c2, &plan, &settings)
        .unwrap()
        .into_values()
        .next()
        .unwrap();
    let result = analyse_channel(ratio, &states_of(&twopt, &plan), &settings).unwrap();
    let zv = ZFactors {
        vector: Some(ZFactor {
            value: 0.7,
            error: 0.01,
        }),
        ..ZFactors::default()
    };
    let zk = zv.get(result.key.current.kind());
    let re = renormalize(&result.final_estimate.re, zk);
    let im = renormalize(&result.final_estimate.im, zk);
    assert_relative_eq!(re.value.central, 0.7 * chans[0].m.0, max_relative = 1e-10);
    assert_relative_eq!(im.error_z, 0.01 * chans[0].m.1.abs(), max_relative = 1e-10);
}

#[test]
fn settings_read_from_yaml_with_defaults() {
    let s: RatioSettings = serde_yaml_ng::from_str(
        "tau_cut: 2\ntwo_state: !floating_gaps\n  prior_width_factor: 2.0\nfinal_method: summation\n",
    )
    .unwrap();
    assert_eq!(s.tau_cut, 2);
    assert_eq!(s.final_method, Estimator::Summation);
    assert_eq!(
        s.two_state,
        formfactory::ratio::TwoStateVariant::FloatingGaps {
            prior_width_factor: 2.0
        }
    );
    assert_eq!(s.negative_root, NegativeRootPolicy::AbsValue);
    let unknown = serde_yaml_ng::from_str::<RatioSettings>("tau_kut: 2\n").unwrap_err();
    assert!(unknown.to_string().contains("tau_kut"), "{unknown}");
    let schema = schemars::schema_for!(RatioSettings);
    let text = serde_json::to_string(&schema).unwrap();
    assert!(text.contains("summation_tsep_min"));
    // The covariance block carries the resample stage's own covariance kind (with the
    // stage's diagonal default), not a free-form value.
    let covariance = &schema.schema.object.as_ref().expect("object").properties["covariance"];
    let covariance = serde_json::to_string(covariance).unwrap();
    assert!(covariance.contains("RatioCovariance"), "{covariance}");
    let block = serde_json::to_string(&schema.definitions["RatioCovariance"]).unwrap();
    assert!(block.contains("CovarianceKind"), "{block}");
    assert!(
        text.contains("eigen_cut") && text.contains("shrinkage"),
        "{text}"
    );
}

/// The two-state truth on tsep 4, 6, 8 with 10 % Gaussian noise, `n_cfg` configurations.
fn noisy_two_state_data(
    n_cfg: usize,
    seed: u64,
) -> (BTreeMap<Momentum, TwoPt>, TwoPointData, ThreePointData) {
    let (twopt, chans) = two_state_setup();
    let (c2, c3) = make_data(
        &twopt,
        &chans,
        &[4, 6, 8],
        12,
        n_cfg,
        Noise::Gaussian { seed, rel: 0.1 },
    );
    (twopt, c2, c3)
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let (twopt, c2, c3) = noisy_two_state_data(60, 9);
    let plan = ResamplePlan::bootstrap(60, 80, 1);
    let states = states_of(&twopt, &plan);
    let settings = RatioSettings::default();
    let run = |threads: usize| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| formfactory::ratio::analyse_all(&c3, &c2, &plan, &states, &settings))
            .unwrap()
    };
    assert_eq!(run(1), run(3));
}

// The late two-state fit (without the smallest separation) takes its per-resample designs from
// the full fit's rows (`two_state_with_late`); it must equal the same fit made on its own with
// its settings, bit for bit (exact equality is the claim: the same values, copied), here with
// gaps that differ per resample so that every resample has its own design.
#[test]
fn late_two_state_fit_with_shared_designs_equals_the_fit_on_its_own() {
    let (twopt, c2, c3) = noisy_two_state_data(60, 11);
    let plan = ResamplePlan::jackknife(60);
    let mut states = states_of(&twopt, &plan);
    for (i, st) in states.values_mut().enumerate() {
        let n = st.gap.len();
        st.gap.samples = (0..n)
            .map(|j| st.gap.central * (1.0 + 1e-3 * ((j * (i + 3)) % 11) as f64))
            .collect();
        st.amp_ratio.samples = (0..n)
            .map(|j| st.amp_ratio.central * (1.0 - 2e-3 * ((j * (i + 5)) % 7) as f64))
            .collect();
    }
    let settings = RatioSettings::default();
    assert!(settings.two_state_late);
    let ratios = build_ratios(&c3, &c2, &plan, &settings).unwrap();
    let late = RatioSettings {
        two_state_tsep_min: 6,
        ..settings.clone()
    };
    for ratio in ratios.into_values() {
        let alone = two_state::two_state(&ratio, &states, &late).unwrap();
        let result = analyse_channel(ratio, &states, &settings).unwrap();
        let shared = result
            .two_state_late
            .expect("a late fit on three separations");
        assert_eq!(shared.tseps, vec![6, 8]);
        assert_eq!(shared, alone);
    }
}

// The stage builds, fits and summarises one channel at a time (`analyse_all`) and, on tables
// it owns, drops them as it goes (`analyse_all_consuming`); both must give what building every
// ratio first and analysing each channel afterwards gives, bit for bit (exact equality is the
// claim: the same operations on the same values), and the same at any thread count.
#[test]
fn channel_by_channel_stage_equals_building_every_ratio_first() {
    let (twopt, c2, c3) = noisy_two_state_data(40, 21);
    let plan = ResamplePlan::jackknife(40);
    let states = states_of(&twopt, &plan);
    let settings = RatioSettings::default();
    let expected: BTreeMap<ChannelKey, _> = build_ratios(&c3, &c2, &plan, &settings)
        .unwrap()
        .into_iter()
        .map(|(k, r)| (k, analyse_channel(r, &states, &settings).unwrap()))
        .collect();
    let streamed = formfactory::ratio::analyse_all(&c3, &c2, &plan, &states, &settings).unwrap();
    assert_eq!(streamed, expected);
    for threads in [1, 3] {
        let (c2, c3) = (c2.clone(), c3.clone());
        let consumed = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| {
                formfactory::ratio::analyse_all_consuming(
                    c3,
                    c2,
                    &plan,
                    &states,
                    &settings,
                    &|_, _| {},
                )
            })
            .unwrap();
        assert_eq!(consumed, expected);
    }
    // What the outputs keep of a ratio point: its central value and error.
    let ratios = build_ratios(&c3, &c2, &plan, &settings).unwrap();
    for (k, r) in &ratios {
        let kept = &expected[k].ratio;
        assert_eq!(kept.points.len(), r.points.len());
        assert_eq!(kept.tseps(), vec![4, 6, 8]);
        for (s, p) in kept.points.iter().zip(&r.points) {
            assert_eq!((s.tsep, s.tau), (p.tsep, p.tau));
            assert_eq!(s.re.central, p.value.re.central);
            assert_eq!(s.im.error, p.value.im.error());
        }
    }
}

// When several series cannot be used, the channel-by-channel stage reports the one that
// building every ratio in the table's key order (tsep first) meets first: a non-finite ratio
// at tsep 4 before a malformed series at tsep 6, the malformed series before a non-finite
// ratio at tsep 8.
#[test]
fn the_first_unusable_series_in_key_order_is_the_error() {
    let (twopt, chans) = single_state_setup();
    let (c2, c3) = make_data(&twopt, &chans, &[4, 6, 8], 12, 16, Noise::Antithetic(1e-3));
    let plan = ResamplePlan::jackknife(16);
    let states = states_of(&twopt, &plan);
    let settings = RatioSettings::default();
    let poisoned = |c3: &mut ThreePointData, ch: &Chan, tsep: u32| {
        c3.channels.get_mut(&ch.key(tsep)).unwrap().re[0] = f64::NAN;
    };
    let (first, second) = (&chans[0], &chans[1]);
    let mut c3_early = c3.clone();
    poisoned(&mut c3_early, second, 4);
    *c3_early.channels.get_mut(&first.key(6)).unwrap() = Series::zeros(9, 16);
    let mut c3_late = c3_early.clone();
    c3_late.channels.get_mut(&second.key(4)).unwrap().re[0] = 1.0;
    poisoned(&mut c3_late, second, 8);
    for (c3, expect) in [(c3_early, "not finite"), (c3_late, "tau outside [0, tsep]")] {
        let built = analysis_message(build_ratios(&c3, &c2, &plan, &settings).unwrap_err());
        assert!(built.contains(expect), "{built}");
        let streamed = formfactory::ratio::analyse_all(&c3, &c2, &plan, &states, &settings);
        assert_eq!(analysis_message(streamed.unwrap_err()), built);
        let consumed = formfactory::ratio::analyse_all_consuming(
            c3,
            c2.clone(),
            &plan,
            &states,
            &settings,
            &|_, _| {},
        );
        assert_eq!(analysis_message(consumed.unwrap_err()), built);
    }
}

// Real and imaginary parts are judged separately: a 5-sigma real difference does not flag an
// imaginary part that agrees, and a part that is identical on every resample (a vanishing
// imaginary part) is not a comparison at all, so it cannot be counted (analytic: jackknife
// error of a known sample spread).
#[test]
fn crosscheck_parts_are_judged_separately() {
    use formfactory::resample::Scheme;
    let n = 10;
    let spread = |c: f64, s: f64| {
        Resampled::new(
            c,
            (0..n)
                .map(|j| c + s * if j % 2 == 0 { 1.0 } else { -1.0 })
                .collect(),
            Scheme::Jackknife,
        )
    };
    let zero = Resampled::constant(0.0, n, Scheme::Jackknife);
    let re = difference(&spread(1.0, 0.1), &spread(0.0, 0.0));
    // jackknife error of +-0.1 alternating: sqrt((n-1)/n * n * 0.01) = 0.3
    assert!((re.error - 0.3).abs() < 1e-12);
    assert_eq!(re.flag, Flag::Above2Sigma);
    let im = difference(&spread(0.1, 0.1), &spread(0.0, 0.0));
    assert_eq!(im.flag, Flag::Consistent);
    assert!(im.informative);
    let silent = difference(&zero, &zero);
    assert!(!silent.informative);
    assert_eq!(silent.flag, Flag::Consistent);
}

//! The spectrum stage with per-momentum twists, called as a library: the mass from a twisted
//! fit at (0,0,0) by the inverted dispersion relation, the dispersion table at twisted
//! momenta, the `E(p) >= m` gate against that mass. Sources: analytic values (a 3-4-5
//! triangle for the continuum relation, closed forms for the lattice one) and seeded
//! synthetic data with a known spectrum.

use approx::assert_relative_eq;
use formfactory::data::{Momentum, Series, TwoPointData, TwoPointKey};
use formfactory::kinematics::{
    continuum_energy, continuum_mass, lattice_dispersion_energy, lattice_dispersion_mass,
    lattice_momentum, twists_by_side, Dispersion,
};
use formfactory::resample::ResamplePlan;
use formfactory::spectrum::{run, IntRange, SpectrumSettings};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use std::collections::BTreeMap;

const L: usize = 16;
const SINK: [f64; 3] = [0.3, 0.0, -3.5];
const SOURCE: [f64; 3] = [0.0, 0.0, 2.0];

// Analytic: continuum E = 0.5 at |p| = 0.3 is the 3-4-5 triangle, m = 0.4; lattice with
// p = (pi, 0, 0) (sin²(p/2) = 1) and sinh²(m/2) = 1, i.e. m = 2 ln(1 + sqrt 2), has
// sinh²(E/2) = 2, i.e. E = 2 ln(sqrt 2 + sqrt 3). No positive mass below |p|: NaN.
#[test]
fn inverted_dispersion_relations_give_the_analytic_mass() {
    assert_relative_eq!(continuum_mass(0.5, [0.3, 0.0, 0.0]), 0.4, epsilon = 1e-15);
    assert_relative_eq!(continuum_mass(0.5, [0.0, 0.18, 0.24]), 0.4, epsilon = 1e-15);
    let m = 2.0 * (1.0 + 2f64.sqrt()).ln();
    let e = 2.0 * (2f64.sqrt() + 3f64.sqrt()).ln();
    let p = [std::f64::consts::PI, 0.0, 0.0];
    assert_relative_eq!(lattice_dispersion_energy(m, p), e, epsilon = 1e-14);
    assert_relative_eq!(lattice_dispersion_mass(e, p), m, epsilon = 1e-14);
    assert_relative_eq!(Dispersion::Lattice.mass(e, p), m, epsilon = 1e-14);
    assert_relative_eq!(
        Dispersion::Continuum.mass(0.5, [0.3, 0.0, 0.0]),
        0.4,
        epsilon = 1e-15
    );
    assert!(continuum_mass(0.2, [0.3, 0.0, 0.0]).is_nan());
    assert!(lattice_dispersion_mass(0.5, p).is_nan());
}

/// Seeded synthetic two-point data, one state per momentum: C(t) = e^{-E t} (1 + noise),
/// `E = relation(m, p)` at the lattice momentum of the twist each momentum carries, noise
/// 0.2 % per time slice, AR(1)-correlated in t.
fn synthetic(
    m: f64,
    relation: Dispersion,
    twists: &BTreeMap<Momentum, [f64; 3]>,
    n_cfg: usize,
) -> TwoPointData {
    let mut rng = ChaCha8Rng::seed_from_u64(2027);
    let mut channels = BTreeMap::new();
    for (&n, &twist) in twists {
        let e = relation.energy(m, lattice_momentum(n, L, twist));
        let mut s = Series::zeros(20, n_cfg);
        for cfg in 0..n_cfg {
            let mut eps = 0.0;
            for t in 0..20 {
                let z: f64 = (0..12).map(|_| rng.gen::<f64>()).sum::<f64>() - 6.0;
                eps = 0.5 * eps + (0.75f64).sqrt() * z;
                let idx = s.index(t, cfg);
                s.re[idx] = (-e * t as f64).exp() * (1.0 + 0.002 * eps);
            }
        }
        let key = TwoPointKey {
            momentum: n,
            smear: None,
            ops: None,
        };
        channels.insert(key, s);
    }
    TwoPointData {
        configs: (0..n_cfg as i64).collect(),
        channels,
    }
}

/// The momenta of the both-twist fixture (tests/fixtures/twist/mock-both.yaml): the sink
/// (0,0,1) and the sources (0,0,0), (-1,0,0), (0,0,-1) of p_f = (0,0,1).
fn fixture_twists() -> BTreeMap<Momentum, [f64; 3]> {
    let pairs = [[0, 0, 1], [1, 0, 1], [0, 0, 2]].map(|q| ([0, 0, 1], q));
    twists_by_side(pairs, [], SINK, SOURCE).unwrap()
}

fn settings(twists: BTreeMap<Momentum, [f64; 3]>, relation: Dispersion) -> SpectrumSettings {
    SpectrumSettings {
        t_min: IntRange { from: 2, to: 4 },
        t_max: Some(14),
        n_states: IntRange { from: 1, to: 1 },
        l_extent: Some(L),
        twist: Some(SINK),
        twists,
        mass_dispersion: relation,
        ..SpectrumSettings::default()
    }
}

#[test]
fn twists_follow_the_side_of_each_momentum() {
    let t = fixture_twists();
    assert_eq!(t[&[0, 0, 1]], SINK);
    for n in [[0, 0, 0], [-1, 0, 0], [0, 0, -1]] {
        assert_eq!(t[&n], SOURCE, "{n:?}");
    }
    // a two-point momentum no channel uses carries the sink twist
    let pairs = [([0, 0, 1], [0, 0, 1])];
    let t = twists_by_side(pairs, [[2, 0, 0], [0, 0, 0]], SINK, SOURCE).unwrap();
    assert_eq!(t[&[2, 0, 0]], SINK);
    assert_eq!(t[&[0, 0, 0]], SOURCE);
    // used on both sides: refused, naming the momentum, both channels and why
    let both = [([0, 0, 1], [0, 0, 1]), ([0, 0, 0], [0, 0, -1])];
    let err = twists_by_side(both, [], SINK, SOURCE)
        .unwrap_err()
        .to_string();
    for part in [
        "momentum (0,0,0)",
        "p_f = (0,0,1), q = (0,0,1)",
        "p_f = (0,0,0), q = (0,0,-1)",
        "no column saying which twist",
    ] {
        assert!(err.contains(part), "`{part}` missing from: {err}");
    }
    // a forward channel (q = 0) uses its momentum on both sides
    let err = twists_by_side([([1, 0, 0], [0, 0, 0])], [], SINK, SOURCE).unwrap_err();
    assert!(
        err.to_string()
            .contains("the forward channel p_f = (1,0,0), q = (0,0,0)"),
        "{err}"
    );
}

// The fit at the twisted (0,0,0) gives E = relation(m, theta/L) (analytic, within 2 sigma);
// the stage's mass is that energy inverted per resample (the inverse formula on every sample)
// and within 2 sigma of the true m; the warning states it. The dispersion table sits at the
// twisted momentum of each two-point function and agrees with the relation the data follow.
#[test]
fn the_mass_of_a_twisted_rest_frame_is_the_inverted_relation() {
    let m_true = 0.48;
    for relation in [Dispersion::Continuum, Dispersion::Lattice] {
        let twists = fixture_twists();
        let data = synthetic(m_true, relation, &twists, 80);
        let r = run(
            &data,
            &ResamplePlan::jackknife(80),
            &settings(twists, relation),
        )
        .unwrap();
        let e0 = r.per_momentum[&[0, 0, 0]].ground_energy();
        let p0 = lattice_momentum([0, 0, 0], L, SOURCE);
        let analytic_e0 = relation.energy(m_true, p0);
        assert!(
            (e0.central - analytic_e0).abs() < 2.0 * e0.error(),
            "{relation:?}: {e0}"
        );
        let mass = r.mass.as_ref().expect("a mass");
        assert_relative_eq!(mass.central, relation.mass(e0.central, p0), epsilon = 1e-14);
        for (m, e) in mass.samples.iter().zip(&e0.samples) {
            assert_relative_eq!(*m, relation.mass(*e, p0), epsilon = 1e-14);
        }
        assert!(
            (mass.central - m_true).abs() < 2.0 * mass.error(),
            "{relation:?}: m = {mass}, truth {m_true}"
        );
        // the twisted energy is far from the mass compared with the error: 0.496 vs 0.48
        assert!((e0.central - m_true).abs() > 20.0 * e0.error());
        let note = r
            .warnings
            .iter()
            .find(|w| w.contains("carries the twist"))
            .expect("the run states the mass");
        assert!(note.contains(&format!("m = {mass}")), "{note}");
        assert!(note.contains(relation.name()), "{note}");
        assert!(r.dropped.is_empty(), "{:?}", r.dropped);
        assert_eq!(r.dispersion.len(), 3);
        for row in &r.dispersion {
            let p = lattice_momentum(row.momentum, L, r_twist(row.momentum));
            assert_eq!(row.p, p);
            assert_relative_eq!(
                row.continuum.central,
                continuum_energy(mass.central, p),
                epsilon = 1e-14
            );
            let sigma = match relation {
                Dispersion::Continuum => row.continuum_sigma,
                Dispersion::Lattice => row.lattice_sigma,
            };
            assert!(sigma.abs() < 3.0, "{relation:?} {row:?}");
        }
    }
}

fn r_twist(n: Momentum) -> [f64; 3] {
    fixture_twists()[&n]
}

// Untwisted (0,0,0): its fit is the mass, bit for bit, and nothing is said about it.
#[test]
fn an_untwisted_rest_frame_is_the_mass() {
    let twists = twists_by_side([([0, 0, 1], [0, 0, 1])], [], SINK, [0.0; 3]).unwrap();
    let data = synthetic(0.48, Dispersion::Continuum, &twists, 40);
    let s = settings(twists, Dispersion::Continuum);
    let r = run(&data, &ResamplePlan::jackknife(40), &s).unwrap();
    assert_eq!(
        r.mass.as_ref(),
        Some(r.per_momentum[&[0, 0, 0]].ground_energy())
    );
    assert!(!r.warnings.iter().any(|w| w.contains("carries the twist")));
    let row = &r.dispersion[0];
    assert_eq!(row.p, lattice_momentum([0, 0, 1], L, SINK));
}

// The E(p) >= m gate compares with the mass, not with the twisted E(0): with the sink twist
// (0, 0, -5.5) the sink (0,0,1) has |p| = 0.049, below the |p| = 0.125 of the twisted
// (0,0,0), so its energy lies below E(0) by many sigma and is still a ground state.
#[test]
fn the_gate_compares_with_the_mass_of_a_twisted_rest_frame() {
    let sink = [0.0, 0.0, -5.5];
    let twists = twists_by_side([([0, 0, 1], [0, 0, 1])], [], sink, SOURCE).unwrap();
    let data = synthetic(0.48, Dispersion::Continuum, &twists, 60);
    let s = SpectrumSettings {
        twist: Some(sink),
        ..settings(twists, Dispersion::Continuum)
    };
    let r = run(&data, &ResamplePlan::jackknife(60), &s).unwrap();
    let (e0, e1) = (
        r.per_momentum[&[0, 0, 0]].ground_energy(),
        r.per_momentum[&[0, 0, 1]].ground_energy(),
    );
    let d = e1 - e0;
    assert!(d.central < -5.0 * d.error(), "E(0,0,1) - E(0) = {d}");
    assert!(r.dropped.is_empty(), "{:?}", r.dropped);
    assert!(e1.central > r.mass.as_ref().unwrap().central);
}

// A rest-frame ground-energy prior on the twisted fit at (0,0,0), centred on its analytic
// E(theta/L) and narrower than the data's error (1e-5 against about 2e-5), reaches the sink
// (0,0,1) through the mass: centred on sqrt(m² + p²) there, so E(0,0,1) stays within 1e-3 of
// the truth. Carried as if E(0) were the mass, its centre would sit 0.015 too high
// (sqrt(0.496² + 0.175²) against sqrt(0.48² + 0.175²)) and pull the fit there.
#[test]
fn a_rest_frame_prior_is_carried_through_the_mass() {
    let m_true = 0.48;
    let twists = fixture_twists();
    let data = synthetic(m_true, Dispersion::Continuum, &twists, 80);
    let p0 = lattice_momentum([0, 0, 0], L, SOURCE);
    let mut s = settings(twists, Dispersion::Continuum);
    s.priors.ground_energy = Some(formfactory::fit::Prior::new(
        continuum_energy(m_true, p0),
        1e-5,
    ));
    let r = run(&data, &ResamplePlan::jackknife(80), &s).unwrap();
    let p1 = lattice_momentum([0, 0, 1], L, SINK);
    let e1 = r.per_momentum[&[0, 0, 1]].ground_energy();
    let truth = continuum_energy(m_true, p1);
    println!("E(0,0,1) = {e1}, truth {truth}");
    assert!((e1.central - truth).abs() < 1e-3, "{e1} vs {truth}");
}

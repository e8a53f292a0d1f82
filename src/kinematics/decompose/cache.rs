//! The kinematic coefficients of every channel on every resample, computed once and shared by
//! the decompositions of all excited-state methods of a run: they depend on the channel's
//! momenta, current and projector and on the resampled energies, never on the method's
//! matrix elements. (They were the larger part of the decomposition's time, recomputed once
//! per method.)

use super::ChannelValue;
use crate::data::{Current, Momentum, Projector};
use crate::kinematics::expansion::Expansion;
use crate::kinematics::factors::{coefficients, FormFactor};
use crate::kinematics::momentum::continuum_energy;
use crate::kinematics::setup::KinematicSetup;
use crate::kinematics::OnShell;
use crate::resample::Resampled;
use nalgebra::Complex;
use rayon::prelude::*;
use std::collections::HashMap;
use std::hash::Hash;
use std::sync::{Arc, Mutex};

/// What the coefficients of a channel depend on besides the setup: sink momentum, momentum
/// transfer, current, projector.
type Key = (Momentum, Momentum, Current, Projector);

/// The coefficients of every form factor at one sample, or why they could not be computed.
pub(super) type Coefficients = Result<Vec<Complex<f64>>, String>;

/// Q² of a channel per resample (sink momentum, momentum transfer), or why it could not be
/// computed.
type Q2 = Result<Arc<Resampled>, String>;

/// Coefficients per channel and resample, and Q² per channel momenta, filled on first use.
/// One cache belongs to one [`KinematicSetup`]: pass the same setup to every decomposition
/// that shares it.
#[derive(Default)]
pub struct CoefficientCache {
    samples: Mutex<HashMap<Key, Arc<Vec<Coefficients>>>>,
    central: Mutex<HashMap<Key, Coefficients>>,
    on_shell: Mutex<HashMap<Key, Coefficients>>,
    q2: Mutex<HashMap<(Momentum, Momentum), Q2>>,
}

/// The value of `key` in `map`, computed by `compute` on first use.
fn memo<K: Eq + Hash, V: Clone>(
    map: &Mutex<HashMap<K, V>>,
    key: K,
    compute: impl FnOnce() -> V,
) -> V {
    // A panic elsewhere cannot leave the map half-written: entries are inserted whole.
    let lock = || map.lock().unwrap_or_else(|e| e.into_inner());
    if let Some(found) = lock().get(&key) {
        return found.clone();
    }
    let computed = compute();
    lock().insert(key, computed.clone());
    computed
}

impl CoefficientCache {
    /// A new, empty cache.
    pub fn new() -> Self {
        Self::default()
    }

    /// The coefficients of `c` at every one of `n` resamples (in parallel on first use, in
    /// sample order). A resample whose kinematics equal the central ones reuses `central`,
    /// computed from the same numbers; the others evaluate the channel's traces expanded in
    /// the energies and the mass ([`Expansion`], computed once here), or, where there is no
    /// trace to expand (spin 0), compute the coefficients directly.
    pub(super) fn samples(
        &self,
        setup: &KinematicSetup,
        c: &ChannelValue,
        central: Option<&(OnShell, Vec<Complex<f64>>)>,
        n: usize,
    ) -> Arc<Vec<Coefficients>> {
        let key = (c.pf, c.q, c.current, c.projector);
        let all = form_factors(setup, c);
        memo(&self.samples, key, || {
            let kinematics = setup.channel(c.pf, c.q).map_err(|e| e.to_string());
            let expansion = kinematics
                .as_ref()
                .ok()
                .and_then(|k| Expansion::new(setup.hadron, c.projector, c.current, &k.at(None)));
            let computed: Vec<Coefficients> = (0..n)
                .into_par_iter()
                .map(|s| {
                    let k = kinematics.as_ref().map_err(|e| e.clone())?.at(Some(s));
                    match central {
                        Some((k0, kc0)) if *k0 == k => Ok(kc0.clone()),
                        _ => match expansion.as_ref().and_then(|e| e.evaluate(&k)) {
                            Some(kc) => Ok(kc),
                            None => Ok(coefficients_at(setup, all, c, &k)),
                        },
                    }
                })
                .collect();
            Arc::new(computed)
        })
    }

    /// Q² of the channel with sink momentum `pf` and momentum transfer `q`, per resample
    /// ([`KinematicSetup::q2`]), computed on first use: every shell of every method that
    /// holds the channel reads the same value.
    pub(super) fn q2(&self, setup: &KinematicSetup, pf: Momentum, q: Momentum) -> Q2 {
        memo(&self.q2, (pf, q), || {
            setup.q2(pf, q).map(Arc::new).map_err(|e| e.to_string())
        })
    }

    /// The coefficients of `c` on the central value ([`channel_coefficients`]), computed on
    /// first use: every method's shell structure and central solve read them.
    pub(super) fn central(&self, setup: &KinematicSetup, c: &ChannelValue) -> Coefficients {
        let key = (c.pf, c.q, c.current, c.projector);
        memo(&self.central, key, || {
            channel_coefficients(setup, form_factors(setup, c), c, None)
        })
    }

    /// The coefficients of `c` on shell: its central kinematics with the continuum energies
    /// of the central mass at its momenta (the rank decision of every method's shell),
    /// computed on first use.
    pub(super) fn on_shell(&self, setup: &KinematicSetup, c: &ChannelValue) -> Coefficients {
        let key = (c.pf, c.q, c.current, c.projector);
        memo(&self.on_shell, key, || {
            let mut on = setup.on_shell(c.pf, c.q, None).map_err(|e| e.to_string())?;
            let mass = setup.mass.central;
            on.ef = continuum_energy(mass, on.pf);
            on.ei = continuum_energy(mass, on.pi);
            Ok(coefficients_at(setup, form_factors(setup, c), c, &on))
        })
    }
}

/// The form factors of `c`'s current for the setup's hadron, in the order of the
/// coefficients: everything the cached values depend on besides the key and the setup.
fn form_factors(setup: &KinematicSetup, c: &ChannelValue) -> &'static [FormFactor] {
    FormFactor::of(setup.hadron, c.current.kind())
}

/// The coefficients of every form factor of `all` in channel `c` at sample `s`.
pub(super) fn channel_coefficients(
    setup: &KinematicSetup,
    all: &[FormFactor],
    c: &ChannelValue,
    s: Option<usize>,
) -> Coefficients {
    let k = setup.on_shell(c.pf, c.q, s).map_err(|e| e.to_string())?;
    Ok(coefficients_at(setup, all, c, &k))
}

/// The coefficients of every form factor of `all` in channel `c` at kinematics `k` (zeros when
/// the channel has none).
pub(super) fn coefficients_at(
    setup: &KinematicSetup,
    all: &[FormFactor],
    c: &ChannelValue,
    k: &OnShell,
) -> Vec<Complex<f64>> {
    let list = coefficients(setup.hadron, c.projector, c.current, k);
    if list.is_empty() {
        vec![Complex::new(0.0, 0.0); all.len()]
    } else {
        list.into_iter().map(|(_, v)| v).collect()
    }
}

//! Two-point fit models (docs/methods.md §2): a sum of 1 to [`MAX_STATES`] exponentials with
//! energies ordered by construction, `E_n = E_{n-1} + exp(l_n)` (the fitted log-gap `l_n`
//! keeps excited states from swapping), optionally in the symmetric periodic form
//! `A_n (e^{-E_n t} + e^{-E_n (T - t)})` for mesons on a lattice with periodic time.
//!
//! Parameter layout (shared by priors, starting values and the Jacobian):
//! `[E_0, l_1, .., l_{N-1}, A_0, .., A_{N-1}]`.

use crate::fit::Model;
use nalgebra::DMatrix;

/// Largest number of states a two-point model may have.
pub const MAX_STATES: usize = 3;

/// The time dependence of one state.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Form {
    /// `e^{-E t}` (open or effectively infinite time extent; baryons).
    Exponential,
    /// `e^{-E t} + e^{-E (T - t)}` with time extent `T` (mesons, periodic time).
    Periodic {
        /// Time extent `T` of the lattice.
        t_extent: f64,
    },
}

impl Form {
    /// One state's time dependence at `t` and its derivative in `E`.
    pub fn term(self, e: f64, t: f64) -> (f64, f64) {
        let a = (-e * t).exp();
        match self {
            Form::Exponential => (a, -t * a),
            Form::Periodic { t_extent } => {
                let tb = t_extent - t;
                let b = (-e * tb).exp();
                (a + b, -t * a - tb * b)
            }
        }
    }
}

/// A multi-exponential two-point model at given times.
#[derive(Clone, Debug, PartialEq)]
pub struct TwoPointModel {
    times: Vec<f64>,
    /// Common spacing of `times` when they are equally spaced (the usual case): the terms are
    /// then built by one multiplication per time instead of one exponential.
    step: Option<f64>,
    n_states: usize,
    form: Form,
}

impl TwoPointModel {
    /// A model with `n_states` (1..=[`MAX_STATES`], clamped) at `times`.
    pub fn new(times: Vec<f64>, n_states: usize, form: Form) -> Self {
        let step = match times.as_slice() {
            [t0, t1, ..] => {
                let dt = t1 - t0;
                let uniform = times
                    .iter()
                    .enumerate()
                    .all(|(i, t)| (t - (t0 + i as f64 * dt)).abs() <= 1e-12 * (1.0 + t.abs()));
                uniform.then_some(dt)
            }
            _ => None,
        };
        TwoPointModel {
            times,
            step,
            n_states: n_states.clamp(1, MAX_STATES),
            form,
        }
    }

    /// Number of states.
    pub fn n_states(&self) -> usize {
        self.n_states
    }

    /// Index of `E_0` in the parameter vector.
    pub const fn ground_energy_index() -> usize {
        0
    }

    /// Index of the log-gap `l_n` (`n >= 1`).
    pub fn log_gap_index(n: usize) -> usize {
        n
    }

    /// Index of the amplitude `A_n`.
    pub fn amplitude_index(&self, n: usize) -> usize {
        self.n_states + n
    }

    /// Energies `E_0 .. E_{N-1}` from the parameters.
    pub fn energies(&self, params: &[f64]) -> Vec<f64> {
        self.energy_array(params)[..self.n_states].to_vec()
    }

    /// [`Self::energies`] without allocating (entries past `n_states` are zero): the fit
    /// evaluates the model several times per resample.
    fn energy_array(&self, params: &[f64]) -> [f64; MAX_STATES] {
        let mut e = [0.0; MAX_STATES];
        e[0] = params[0];
        for n in 1..self.n_states {
            e[n] = e[n - 1] + params[n].exp();
        }
        e
    }

    /// Amplitudes `A_0 .. A_{N-1}` from the parameters.
    pub fn amplitudes<'a>(&self, params: &'a [f64]) -> &'a [f64] {
        &params[self.n_states..2 * self.n_states]
    }

    /// Call `f(i, value, d value / d E)` for one state of energy `e` at every time `i`. On
    /// equally spaced times `e^{-E t}` is advanced by the factor `e^{-E dt}` (relative rounding
    /// below `n_points * 1e-16`, far inside any fit tolerance); otherwise, or when the factors
    /// over- or underflow, every term is computed directly.
    fn for_each_term(&self, e: f64, mut f: impl FnMut(usize, f64, f64)) {
        let direct = |f: &mut dyn FnMut(usize, f64, f64)| {
            for (i, &t) in self.times.iter().enumerate() {
                let (v, dv) = self.form.term(e, t);
                f(i, v, dv);
            }
        };
        let (Some(dt), Some(&t0)) = (self.step, self.times.first()) else {
            return direct(&mut f);
        };
        let usable = |x: f64| x.is_normal() && x > 0.0;
        let (mut a, q) = ((-e * t0).exp(), (-e * dt).exp());
        match self.form {
            Form::Exponential if usable(a) && usable(q) => {
                for (i, &t) in self.times.iter().enumerate() {
                    f(i, a, -t * a);
                    a *= q;
                }
            }
            Form::Periodic { t_extent } => {
                let mut b = (-e * (t_extent - t0)).exp();
                let q_inv = (e * dt).exp();
                if !(usable(a) && usable(q) && usable(b) && usable(q_inv)) {
                    return direct(&mut f);
                }
                for (i, &t) in self.times.iter().enumerate() {
                    f(i, a + b, -t * a - (t_extent - t) * b);
                    a *= q;
                    b *= q_inv;
                }
            }
            Form::Exponential => direct(&mut f),
        }
    }

    /// Parameters from energies (strictly increasing) and amplitudes.
    pub fn params_from(energies: &[f64], amplitudes: &[f64]) -> Vec<f64> {
        let mut p = vec![energies[0]];
        for n in 1..energies.len() {
            p.push((energies[n] - energies[n - 1]).max(1e-300).ln());
        }
        p.extend_from_slice(amplitudes);
        p
    }
}

impl Model for TwoPointModel {
    fn n_params(&self) -> usize {
        2 * self.n_states
    }

    fn n_points(&self) -> usize {
        self.times.len()
    }

    fn eval(&self, params: &[f64], out: &mut [f64]) {
        let e = self.energy_array(params);
        let a = self.amplitudes(params);
        out.fill(0.0);
        for (&en, &an) in e.iter().zip(a) {
            self.for_each_term(en, |i, v, _| {
                if let Some(o) = out.get_mut(i) {
                    *o += an * v;
                }
            });
        }
    }

    fn jacobian(&self, params: &[f64], out: &mut DMatrix<f64>) {
        let ns = self.n_states;
        let e = self.energy_array(params);
        let a = self.amplitudes(params);
        // Column n + ns: d/dA_n = term; column 0 for now collects A_n d term / dE_n per state
        // n in its own column n, then E_m's dependence on E_0 (slope 1) and on l_k for
        // k <= m (slope exp(l_k)) folds them into the columns of E_0 and the log-gaps.
        for n in 0..ns {
            self.for_each_term(e[n], |i, v, dv| {
                out[(i, ns + n)] = v;
                out[(i, n)] = a[n] * dv;
            });
        }
        let mut slopes = [1.0; MAX_STATES];
        for (k, slope) in slopes.iter_mut().enumerate().take(ns).skip(1) {
            *slope = params[k].exp();
        }
        for i in 0..self.times.len() {
            let mut tail = 0.0;
            for k in (0..ns).rev() {
                tail += out[(i, k)];
                out[(i, k)] = tail * slopes[k];
            }
        }
    }
}

//! Solving one Q² shell: the real linear system of its channels (real and imaginary parts
//! whose coefficients do not all vanish), whitened by the data covariance and solved by SVD
//! on the central value and on every resample; form factors mixing with a direction the
//! channels do not determine are left out.
//!
//! Which directions the channels determine is decided on on-shell kinematics (continuum
//! energies `E = sqrt(m² + p²)` at the central mass), not on the fitted energies: rows that
//! are proportional on shell (e.g. `A_3` and `A_4` with the `pol3` projector at `q = (0,0,1)`,
//! sink at rest) differ at the fitted energies only by the energies' noise, which would leave
//! a condition number of a few hundred and a meaningless solution above any fixed threshold.
//! The numeric solve then keeps only as many singular directions as the on-shell system has.

use super::cache::{CoefficientCache, Coefficients};
use super::resamples::{FastSolver, RowSource};
use super::rows::{row_data, structure, Row};
use super::{ChannelValue, ShellResult, NULL_OVERLAP, SINGULAR_THRESHOLD};
use crate::data::{sub, Current, CurrentKind};
use crate::fit::{Weighting, Weights};
use crate::kinematics::factors::FormFactor;
use crate::kinematics::momentum::q2_to_gev2;
use crate::kinematics::setup::{at, KinematicSetup};
use crate::kinematics::OnShell;
use crate::resample::Resampled;
use nalgebra::{Complex, DMatrix, DVector};
use rayon::prelude::*;
use std::collections::BTreeMap;
use std::sync::Arc;

type Outcome<T> = std::result::Result<T, String>;

/// The solve at one sample: the form factors of the unknowns, chi², the condition number,
/// which unknowns are determined, and the number of undetermined directions.
type Solved = (DVector<f64>, f64, f64, Vec<bool>, usize);

/// Solve one shell; `Err` carries the reason it could not be solved.
pub(super) fn solve_shell(
    members: &[&ChannelValue],
    kind: CurrentKind,
    setup: &KinematicSetup,
    weights: Weighting,
    phases: &BTreeMap<Current, Complex<f64>>,
    n: usize,
    cache: &CoefficientCache,
) -> Outcome<ShellResult> {
    let all = FormFactor::of(setup.hadron, kind);
    check_shell(members, kind, setup, all)?;
    let system =
        ShellSystem::new(members, setup, all, weights, phases, cache)?.with_samples(cache, n);
    let rank = system.on_shell_rank(cache)?;
    let (g0, chi2, condition, determined, n_null) = system.solve(None, rank)?;
    if !determined.iter().any(|d| *d) {
        return Err(format!(
            "the coefficient matrix is singular: the channels determine none of {} alone (needs another q direction or projector)",
            names(system.unknowns.iter().map(|&j| all[j]))
        ));
    }
    let per_sample = system.solve_resamples(n, rank)?;
    let (form_factors, undetermined) = system.form_factors(&g0, &per_sample, &determined);
    let q2 = system.q2(cache)?;
    let dof = system.rows.len() - (system.unknowns.len() - n_null);
    Ok(ShellResult {
        label: String::new(),
        kind,
        q2_gev2: setup.spacing_fm.map(|a| q2.map(|x| q2_to_gev2(x, a))),
        q2,
        form_factors,
        n_channels: system.used.len(),
        n_dropped: members.len() - system.used.len(),
        dof,
        chi2_dof: (dof > 0).then(|| chi2 / dof as f64),
        condition,
        undetermined,
    })
}

/// Shells no decomposition can solve: no form factors for this hadron and current, or a
/// tensor current away from `q = 0`.
fn check_shell(
    members: &[&ChannelValue],
    kind: CurrentKind,
    setup: &KinematicSetup,
    all: &[FormFactor],
) -> Outcome<()> {
    if all.is_empty() {
        return Err(format!(
            "a {:?} hadron has no form factors for a {kind:?} current",
            setup.hadron
        ));
    }
    if kind == CurrentKind::Tensor && members.iter().any(|c| c.q != [0, 0, 0]) {
        return Err(
            "the tensor vertex sigma_mu_nu g_T holds for forward matrix elements only (q = 0)"
                .into(),
        );
    }
    Ok(())
}

/// The linear system of one shell: which parts of which channels enter, which form factors
/// are unknowns, the data per row and their whitening, and the central kinematics.
struct ShellSystem<'a> {
    members: &'a [&'a ChannelValue],
    setup: &'a KinematicSetup,
    all: &'a [FormFactor],
    rows: Vec<Row>,
    /// Channels with at least one row.
    used: Vec<usize>,
    /// Indices into `all` of the form factors some row constrains.
    unknowns: Vec<usize>,
    data: Vec<Resampled>,
    w: Weights,
    /// Kinematics and coefficients of every used channel on the central value.
    central: BTreeMap<usize, (OnShell, Vec<Complex<f64>>)>,
    /// Coefficients of every used channel per resample.
    per_sample: BTreeMap<usize, Arc<Vec<Coefficients>>>,
}

impl<'a> ShellSystem<'a> {
    fn new(
        members: &'a [&'a ChannelValue],
        setup: &'a KinematicSetup,
        all: &'a [FormFactor],
        weights: Weighting,
        phases: &BTreeMap<Current, Complex<f64>>,
        cache: &CoefficientCache,
    ) -> Outcome<Self> {
        let coeffs = |c: &ChannelValue| cache.central(setup, c);
        let (rows, used, unknowns) = structure(members, all.len(), coeffs)?;
        let data = row_data(&rows, members, phases);
        let w = whitening(&data, &rows, members, weights)?;
        let mut central = BTreeMap::new();
        for &ci in &used {
            let c = members[ci];
            let k = setup.on_shell(c.pf, c.q, None).map_err(|e| e.to_string())?;
            central.insert(ci, (k, coeffs(c)?));
        }
        Ok(ShellSystem {
            members,
            setup,
            all,
            rows,
            used,
            unknowns,
            data,
            w,
            central,
            per_sample: BTreeMap::new(),
        })
    }

    /// The coefficients of every used channel on each of `n` resamples, from `cache`.
    fn with_samples(mut self, cache: &CoefficientCache, n: usize) -> Self {
        for &ci in &self.used {
            let c = self.members[ci];
            let central = self.central.get(&ci);
            let samples = cache.samples(self.setup, c, central, n);
            self.per_sample.insert(ci, samples);
        }
        self
    }

    /// The coefficient matrix (rows x unknowns) at sample `s`.
    fn matrix(&self, s: Option<usize>) -> Outcome<DMatrix<f64>> {
        let mut k = DMatrix::zeros(self.rows.len(), self.unknowns.len());
        // Coefficients per used channel: the central ones, or those of the resample (see
        // [`CoefficientCache::samples`]).
        let mut cache: BTreeMap<usize, &[Complex<f64>]> = BTreeMap::new();
        for &ci in &self.used {
            let kc = match s {
                None => self.central.get(&ci).map(|(_, kc)| kc.as_slice()),
                Some(s) => match self.per_sample.get(&ci).and_then(|v| v.get(s)) {
                    Some(Ok(kc)) => Some(kc.as_slice()),
                    Some(Err(e)) => return Err(e.clone()),
                    None => None,
                },
            };
            let kc = kc.ok_or_else(|| {
                format!("no coefficients for channel {}", self.members[ci].label())
            })?;
            cache.insert(ci, kc);
        }
        for (r, &(ci, imag)) in self.rows.iter().enumerate() {
            let kc = cache[&ci];
            for (col, &j) in self.unknowns.iter().enumerate() {
                k[(r, col)] = if imag { kc[j].im } else { kc[j].re };
            }
        }
        Ok(k)
    }

    /// The rank of the coefficient matrix on shell: continuum energies at the central mass,
    /// each row scaled to unit length, singular values above [`SINGULAR_THRESHOLD`] of the
    /// largest.
    fn on_shell_rank(&self, coefficients: &CoefficientCache) -> Outcome<usize> {
        let mut k = DMatrix::zeros(self.rows.len(), self.unknowns.len());
        let mut cache: BTreeMap<usize, Vec<Complex<f64>>> = BTreeMap::new();
        for &ci in &self.used {
            cache.insert(ci, coefficients.on_shell(self.setup, self.members[ci])?);
        }
        for (r, &(ci, imag)) in self.rows.iter().enumerate() {
            let kc = &cache[&ci];
            for (col, &j) in self.unknowns.iter().enumerate() {
                let z = kc.get(j).copied().unwrap_or_default();
                k[(r, col)] = if imag { z.im } else { z.re };
            }
            let norm = k.row(r).norm();
            if norm > 0.0 {
                k.row_mut(r).unscale_mut(norm);
            }
        }
        if k.iter().any(|x| !x.is_finite()) {
            return Err("the on-shell coefficients are not finite".into());
        }
        let sv = k.singular_values();
        let smax = sv.max();
        Ok(sv
            .iter()
            .filter(|v| **v > smax * SINGULAR_THRESHOLD)
            .count())
    }

    /// The whitened system at sample `s` solved by SVD, singular directions cut: those below
    /// [`SINGULAR_THRESHOLD`] of the largest and all beyond the `rank` largest.
    fn solve(&self, s: Option<usize>, rank: usize) -> Outcome<Solved> {
        let k = self.matrix(s)?;
        let y = DVector::from_iterator(self.rows.len(), self.data.iter().map(|d| at(d, s)));
        let a = self.w.whiten_matrix(&k);
        let mut b = DVector::zeros(self.rows.len());
        self.w.whiten(y.as_slice(), b.as_mut_slice());
        let which = || s.map_or("the central value".to_string(), |s| format!("resample {s}"));
        if a.iter().chain(b.iter()).any(|x| !x.is_finite()) {
            return Err(format!(
                "{}: the shell's equations hold a non-finite value (a NaN or infinite energy, \
                 kinematic factor or matrix element from an earlier stage)",
                which()
            ));
        }
        // The unordered decomposition never sorts, so it cannot panic on a NaN singular value.
        let svd = nalgebra::SVD::try_new_unordered(a.clone(), true, true, f64::EPSILON, 10_000)
            .ok_or_else(|| format!("{}: the decomposition's SVD did not converge", which()))?;
        let smax = svd.singular_values.max();
        if svd.singular_values.iter().any(|v| !v.is_finite()) {
            return Err(format!(
                "{}: the decomposition's SVD gave a non-finite singular value",
                which()
            ));
        }
        if smax <= 0.0 {
            return Err("the coefficient matrix is zero".into());
        }
        let mut sorted: Vec<f64> = svd.singular_values.iter().copied().collect();
        sorted.sort_by(|a, b| b.total_cmp(a));
        let cut = (smax * SINGULAR_THRESHOLD).max(sorted.get(rank).copied().unwrap_or(0.0));
        let kept_min = svd
            .singular_values
            .iter()
            .copied()
            .filter(|v| *v > cut)
            .fold(f64::INFINITY, f64::min);
        let g = svd.solve(&b, cut).map_err(|e| e.to_string())?;
        let chi2 = (&a * &g - &b).norm_squared();
        let null: Vec<usize> = (0..svd.singular_values.len())
            .filter(|&i| svd.singular_values[i] <= cut)
            .collect();
        let v_t = svd
            .v_t
            .as_ref()
            .ok_or("the SVD gave no right singular vectors")?;
        let determined: Vec<bool> = (0..self.unknowns.len())
            .map(|col| {
                null.iter()
                    .map(|&i| v_t[(i, col)].powi(2))
                    .sum::<f64>()
                    .sqrt()
                    < NULL_OVERLAP
            })
            .collect();
        Ok((g, chi2, smax / kept_min, determined, null.len()))
    }

    /// The solutions of all `n` resamples, resample by resample (`unknowns.len()` values
    /// each). With as many directions kept as unknowns, each resample is solved by the normal
    /// equations when its conditioning allows ([`FastSolver`]), otherwise (and with fewer
    /// directions kept) by [`Self::solve`]'s SVD. The first error in resample order is
    /// returned, so the outcome does not depend on the number of threads.
    fn solve_resamples(&self, n: usize, rank: usize) -> Outcome<Vec<f64>> {
        let k = self.unknowns.len();
        let fast = (rank == k).then(|| self.fast_solver()).flatten();
        let mut out = vec![0.0; n * k];
        let failed: Vec<Option<String>> = out
            .par_chunks_mut(k.max(1))
            .enumerate()
            .map_init(
                || fast.as_ref().map(FastSolver::buffers),
                |buffers, (s, o)| {
                    if let (Some(f), Some(b)) = (&fast, buffers.as_mut()) {
                        if f.solve(s, b, o) {
                            return None;
                        }
                    }
                    match self.solve(Some(s), rank) {
                        Ok((g, ..)) if g.len() == o.len() => {
                            o.copy_from_slice(g.as_slice());
                            None
                        }
                        Ok(_) => Some(format!("resample {s}: the solve gave a wrong size")),
                        Err(e) => Some(e),
                    }
                },
            )
            .collect();
        match failed.into_iter().flatten().next() {
            Some(e) => Err(e),
            None => Ok(out),
        }
    }

    /// The normal-equations solver over this shell's rows; `None` when it does not apply
    /// (the SVD path then solves every resample).
    fn fast_solver(&self) -> Option<FastSolver<'_>> {
        let rows = self
            .rows
            .iter()
            .zip(&self.data)
            .map(|(&(ci, imag), d)| {
                self.per_sample.get(&ci).map(|c| RowSource {
                    coefficients: c.as_slice(),
                    imag,
                    data: &d.samples,
                })
            })
            .collect::<Option<Vec<_>>>()?;
        FastSolver::new(rows, &self.unknowns, &self.w)
    }

    /// The determined form factors (central value `g0` and the solutions of every resample,
    /// `per_sample[s * k + col]` for `k` unknowns), and the undetermined ones.
    fn form_factors(
        &self,
        g0: &DVector<f64>,
        per_sample: &[f64],
        determined: &[bool],
    ) -> (Vec<(FormFactor, Resampled)>, Vec<FormFactor>) {
        let k = self.unknowns.len().max(1);
        let samples: Vec<Vec<f64>> = (0..self.unknowns.len())
            .map(|col| per_sample.chunks_exact(k).map(|g| g[col]).collect())
            .collect();
        let scheme = self.setup.mass.scheme;
        let form_factors = self
            .unknowns
            .iter()
            .zip(samples)
            .enumerate()
            .filter(|(col, _)| determined[*col])
            .map(|(col, (&j, smp))| (self.all[j], Resampled::new(g0[col], smp, scheme)))
            .collect();
        let undetermined = self
            .unknowns
            .iter()
            .zip(determined)
            .filter(|(_, d)| !**d)
            .map(|(&j, _)| self.all[j])
            .collect();
        (form_factors, undetermined)
    }

    /// Q² of the shell: the mean over its used channels, per resample (each channel's from
    /// `cache`); refused when timelike.
    fn q2(&self, cache: &CoefficientCache) -> Outcome<Resampled> {
        let q2s = self
            .used
            .iter()
            .map(|&ci| cache.q2(self.setup, self.members[ci].pf, self.members[ci].q))
            .collect::<Outcome<Vec<_>>>()?;
        let refs: Vec<&Resampled> = q2s.iter().map(|q| &**q).collect();
        let q2 = Resampled::try_combine(&refs, "Q² of the shell's channels", |v| {
            v.iter().sum::<f64>() / v.len() as f64
        })
        .map_err(|e| e.to_string())?;
        // Elastic form factors are spacelike: Q² = |q|² - (E_f - E_i)² >= 0 for energies that
        // obey any dispersion relation. A negative Q² means an unphysical energy (e.g. a
        // spurious fitted ground state); the shell is skipped, naming the momenta.
        if q2.central < -1e-12 {
            let c = self.members[self.used[0]];
            return Err(format!(
                "Q² = {:.4e} < 0 (timelike) at p_f = {:?}, p_i = {:?}: the energies are \
                 unphysical for an elastic form factor; check the spectrum fits of these momenta",
                q2.central,
                c.pf,
                sub(c.pf, c.q)
            ));
        }
        Ok(q2)
    }
}

fn names(list: impl Iterator<Item = FormFactor>) -> String {
    list.map(|f| f.name()).collect::<Vec<_>>().join(", ")
}

/// Whitening of the stacked parts: inverse errors, or the (shrunk) covariance estimated from
/// the resamples (`resample::covariance`), inverted by `fit::Weights`.
fn whitening(
    data: &[Resampled],
    rows: &[Row],
    members: &[&ChannelValue],
    weights: Weighting,
) -> std::result::Result<Weights, String> {
    for (d, &(ci, imag)) in data.iter().zip(rows) {
        let v = d.variance();
        if !(v > 0.0 && v.is_finite()) {
            return Err(format!(
                "channel {} ({} part) has variance {v}; positive finite variance expected",
                members[ci].label(),
                if imag { "imaginary" } else { "real" }
            ));
        }
    }
    weights.weights(data).map_err(|e| {
        format!(
            "{e} ({} stacked parts, {} samples); use diagonal or shrinkage weights",
            data.len(),
            data[0].len()
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{Momentum, Projector};
    use crate::kinematics::factors::{coefficients, Hadron};
    use crate::kinematics::momentum::{continuum_energy, lattice_momentum};
    use crate::kinematics::setup::Energies;
    use crate::resample::Scheme;

    const L: usize = 24;
    const N: usize = 9;

    /// Exact channel values of the shell `nf2=0 ni2=1 nq2=1` (sink at rest, `q = (0,0,1)`):
    /// V1..V4 under every projector, `Pi = sum_k K_k G_k` with the trace coefficients at each
    /// sample's kinematics and `G_E = 1.1 - 0.02 s`, `G_M = 4.5 + 0.03 s` on sample `s`.
    fn exact(st: &KinematicSetup, pf: Momentum, q: Momentum) -> Vec<ChannelValue> {
        let truth = |s: Option<usize>| {
            let x = s.map_or(-1.0, |s| s as f64);
            [1.1 - 0.02 * x, 4.5 + 0.03 * x]
        };
        let mut out = Vec::new();
        for current in [Current::V1, Current::V2, Current::V3, Current::V4] {
            for projector in [1, 2, 3]
                .map(Projector::Pol)
                .into_iter()
                .chain([Projector::Unpol])
            {
                let value = |s: Option<usize>| -> Complex<f64> {
                    let k = st.on_shell(pf, q, s).expect("kinematics");
                    let g = truth(s);
                    coefficients(Hadron::Spin1Half, projector, current, &k)
                        .iter()
                        .zip(g)
                        .map(|((_, kc), g)| kc * g)
                        .sum()
                };
                let samples: Vec<Complex<f64>> = (0..N).map(|s| value(Some(s))).collect();
                let part = |f: fn(&Complex<f64>) -> f64| {
                    Resampled::new(
                        f(&value(None)),
                        samples.iter().map(f).collect(),
                        Scheme::Jackknife,
                    )
                };
                out.push(ChannelValue {
                    pf,
                    q,
                    current,
                    projector,
                    re: part(|z| z.re),
                    im: part(|z| z.im),
                });
            }
        }
        out
    }

    // A resample whose system is badly conditioned (its source energy a thousand times the
    // others, so the G_M coefficients nearly vanish against G_E's) is left by the normal
    // equations to the SVD, which solves it; the others are solved by the normal equations,
    // and every resample agrees with its own SVD solve and with the exact form factors.
    #[test]
    fn a_badly_conditioned_resample_goes_to_the_svd() {
        let mass = Resampled::new(
            0.5,
            (0..N).map(|s| 0.5 + 0.001 * s as f64).collect(),
            Scheme::Jackknife,
        );
        let (pf, q) = ([0, 0, 0], [0, 0, 1]);
        let mut fitted = BTreeMap::new();
        for n in [[0, 0, 0], [0, 0, -1]] {
            let p = lattice_momentum(n, L, [0.0; 3]);
            let mut e = mass.map(|m| continuum_energy(m, p));
            if n != [0, 0, 0] {
                e.samples[5] *= 1e3;
            }
            fitted.insert(n, e);
        }
        let st = KinematicSetup {
            hadron: Hadron::Spin1Half,
            l: L,
            twist_sink: [0.0; 3],
            twist_source: [0.0; 3],
            mass,
            energies: Energies::Fitted(fitted),
            spacing_fm: None,
        };
        let channels = exact(&st, pf, q);
        let members: Vec<&ChannelValue> = channels.iter().collect();
        let all = FormFactor::of(Hadron::Spin1Half, CurrentKind::Vector);
        let cache = CoefficientCache::new();
        let phases = BTreeMap::new();
        let system = ShellSystem::new(&members, &st, all, Weighting::Diagonal, &phases, &cache)
            .expect("shell")
            .with_samples(&cache, N);
        let rank = system.on_shell_rank(&cache).expect("rank");
        assert_eq!(rank, 2);
        let fast = system.fast_solver().expect("two unknowns");
        let mut buffers = fast.buffers();
        let mut out = [0.0; 2];
        let declined: Vec<usize> = (0..N)
            .filter(|&s| !fast.solve(s, &mut buffers, &mut out))
            .collect();
        assert_eq!(declined, [5]);
        let solved = system.solve_resamples(N, rank).expect("every resample");
        for (s, g) in solved.chunks_exact(2).enumerate() {
            let (svd, ..) = system.solve(Some(s), rank).expect("svd");
            let want = [1.1 - 0.02 * s as f64, 4.5 + 0.03 * s as f64];
            for col in 0..2 {
                assert!((g[col] - svd[col]).abs() <= 1e-12 * svd[col].abs(), "{s}");
                assert!((g[col] - want[col]).abs() <= 1e-9 * want[col], "{s}");
            }
        }
    }

    // A resample with a non-finite energy cannot be solved: the shell is refused with the
    // SVD path's message naming the first such resample in resample order.
    #[test]
    fn the_first_unsolvable_resample_is_named() {
        let mass = Resampled::new(0.5, vec![0.5; N], Scheme::Jackknife);
        let (pf, q) = ([0, 0, 0], [0, 0, 1]);
        let st = KinematicSetup {
            hadron: Hadron::Spin1Half,
            l: L,
            twist_sink: [0.0; 3],
            twist_source: [0.0; 3],
            mass: mass.clone(),
            energies: Energies::Fitted(BTreeMap::new()),
            spacing_fm: None,
        };
        let mut fitted = BTreeMap::new();
        for n in [[0, 0, 0], [0, 0, -1]] {
            let p = lattice_momentum(n, L, [0.0; 3]);
            fitted.insert(n, mass.map(|m| continuum_energy(m, p)));
        }
        let good = KinematicSetup {
            energies: Energies::Fitted(fitted.clone()),
            ..st.clone()
        };
        let channels = exact(&good, pf, q);
        for (n, e) in fitted.iter_mut() {
            if *n != [0, 0, 0] {
                e.samples[7] = f64::NAN;
                e.samples[3] = f64::NAN;
            }
        }
        let bad = KinematicSetup {
            energies: Energies::Fitted(fitted),
            ..st
        };
        let members: Vec<&ChannelValue> = channels.iter().collect();
        let kind = CurrentKind::Vector;
        let result = solve_shell(
            &members,
            kind,
            &bad,
            Weighting::Diagonal,
            &BTreeMap::new(),
            N,
            &CoefficientCache::new(),
        );
        let reason = result.expect_err("refused");
        assert!(
            reason.contains("resample 3") && reason.contains("non-finite"),
            "{reason}"
        );
    }
}

//! The variational method for a matrix of correlators (docs/methods.md §2; Blossier et al.,
//! JHEP 04 (2009) 094): solve `C(t) v = lambda(t, t0) C(t0) v` by Cholesky reduction
//! `C(t0) = L L^T`, the symmetric eigenproblem of `L^{-1} C(t) L^{-T}`, and `v = L^{-T} u`
//! (so `v^T C(t0) v = 1`). The principal correlators `lambda_n(t, t0) ~ exp(-E_n (t - t0))`
//! are computed per resample; on every sample the states are matched to the central
//! solution by their largest `C(t0)`-overlap and the eigenvector signs are aligned with it,
//! so the ordering and signs are consistent across resamples.

use crate::error::{Error, Result};
use crate::resample::Resampled;
use nalgebra::DMatrix;
use rayon::prelude::*;

/// The solution of one generalized eigenproblem.
#[derive(Clone, Debug, PartialEq)]
pub struct GevpSolution {
    /// Eigenvalues `lambda_n`, largest first (ground state first).
    pub eigenvalues: Vec<f64>,
    /// Eigenvectors `v_n` as columns, normalised to `v^T C(t0) v = 1`, sign fixed so that the
    /// largest-magnitude component is positive.
    pub eigenvectors: DMatrix<f64>,
}

/// Solve `C(t) v = lambda C(t0) v` (both matrices symmetrised first). Errors when `C(t0)` is
/// not positive definite or either matrix has non-finite entries.
pub fn solve(c_t: &DMatrix<f64>, c_t0: &DMatrix<f64>) -> Result<GevpSolution> {
    let n = c_t0.nrows();
    if n == 0 || c_t0.ncols() != n || c_t.shape() != (n, n) {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "GEVP: matrices are {:?} and {:?}; expected two equal square matrices",
                c_t.shape(),
                c_t0.shape()
            ),
        ));
    }
    if c_t.iter().chain(c_t0.iter()).any(|x| !x.is_finite()) {
        return Err(Error::analysis(
            "spectrum",
            "GEVP: correlator matrix has NaN or infinite entries",
        ));
    }
    let sym = |m: &DMatrix<f64>| (m + m.transpose()) * 0.5;
    let chol = sym(c_t0).cholesky().ok_or_else(|| {
        Error::analysis(
            "spectrum",
            "GEVP: C(t0) is not positive definite; choose a smaller t0 or fewer operators",
        )
    })?;
    let l = chol.l();
    let id = DMatrix::identity(n, n);
    let linv = l
        .solve_lower_triangular(&id)
        .ok_or_else(|| Error::analysis("spectrum", "GEVP: Cholesky factor of C(t0) is singular"))?;
    let a = sym(&(&linv * sym(c_t) * linv.transpose()));
    let eig = a.symmetric_eigen();
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&i, &j| eig.eigenvalues[j].total_cmp(&eig.eigenvalues[i]));
    let vecs = linv.transpose() * &eig.eigenvectors;
    let mut eigenvectors = DMatrix::zeros(n, n);
    for (k, &i) in order.iter().enumerate() {
        let mut v = vecs.column(i).into_owned();
        let imax = v.iamax();
        if v[imax] < 0.0 {
            v = -v;
        }
        eigenvectors.set_column(k, &v);
    }
    Ok(GevpSolution {
        eigenvalues: order.iter().map(|&i| eig.eigenvalues[i]).collect(),
        eigenvectors,
    })
}

/// Re-order and re-sign `sol` (a sample's solution) to match `reference` (the central one):
/// state `k` of the result is the state of `sol` with the largest `|v_ref_k^T C(t0) v|`,
/// chosen greedily from the largest overlap down, and its sign makes that overlap positive.
fn align(sol: GevpSolution, reference: &GevpSolution, c_t0: &DMatrix<f64>) -> GevpSolution {
    let n = sol.eigenvalues.len();
    let overlap = reference.eigenvectors.transpose() * c_t0 * &sol.eigenvectors;
    let mut pairs: Vec<(usize, usize)> = (0..n).flat_map(|r| (0..n).map(move |s| (r, s))).collect();
    pairs.sort_by(|&(r1, s1), &(r2, s2)| {
        overlap[(r2, s2)].abs().total_cmp(&overlap[(r1, s1)].abs())
    });
    let mut assigned = vec![None; n];
    let mut used = vec![false; n];
    for (r, s) in pairs {
        if assigned[r].is_none() && !used[s] {
            assigned[r] = Some(s);
            used[s] = true;
        }
    }
    let mut eigenvalues = vec![0.0; n];
    let mut eigenvectors = DMatrix::zeros(n, n);
    for (r, s) in assigned.iter().enumerate() {
        let s = s.unwrap_or(r);
        eigenvalues[r] = sol.eigenvalues[s];
        let sign = if overlap[(r, s)] < 0.0 { -1.0 } else { 1.0 };
        eigenvectors.set_column(r, &(sol.eigenvectors.column(s) * sign));
    }
    GevpSolution {
        eigenvalues,
        eigenvectors,
    }
}

/// Resampled principal correlators and eigenvectors of a correlator matrix.
#[derive(Clone, Debug, PartialEq)]
pub struct PrincipalCorrelators {
    /// The reference time `t0`.
    pub t0: usize,
    /// `lambda[n][t]`, state `n` (ground first), every time slice `t` (`lambda[n][t0] = 1`).
    pub lambda: Vec<Vec<Resampled>>,
    /// `eigenvectors[n][i]`: component `i` of `v_n` at time `t_ref`, per resample.
    pub eigenvectors: Vec<Vec<Resampled>>,
    /// The time at which the eigenvectors are reported.
    pub t_ref: usize,
}

/// Principal correlators of an `n x n` correlator matrix given row-major as `matrix[i * n + j]`
/// (each a resampled time series of equal length and resamples). The central value and every
/// sample are solved independently (in parallel, results independent of thread count).
pub fn principal_correlators(
    matrix: &[Vec<Resampled>],
    n: usize,
    t0: usize,
    t_ref: usize,
) -> Result<PrincipalCorrelators> {
    if n == 0 || matrix.len() != n * n {
        return Err(Error::analysis(
            "spectrum",
            format!(
                "GEVP: {} correlators given for a {n}x{n} matrix",
                matrix.len()
            ),
        ));
    }
    let n_t = matrix[0].len();
    let n_s = matrix[0].first().map_or(0, Resampled::len);
    if matrix
        .iter()
        .any(|c| c.len() != n_t || c.iter().any(|v| v.len() != n_s))
        || t0 >= n_t
        || t_ref >= n_t
    {
        return Err(Error::analysis(
            "spectrum",
            format!("GEVP: correlators differ in length or resamples, or t0 {t0} / t_ref {t_ref} is outside 0..{n_t}"),
        ));
    }
    let at = |t: usize, s: Option<usize>| {
        DMatrix::from_fn(n, n, |i, j| {
            let v = &matrix[i * n + j][t];
            s.map_or(v.central, |s| v.samples[s])
        })
    };
    let solve_all = |s: Option<usize>| -> Result<Vec<GevpSolution>> {
        let c0 = at(t0, s);
        (0..n_t).map(|t| solve(&at(t, s), &c0)).collect()
    };
    let central = solve_all(None)?;
    let samples: Vec<Vec<GevpSolution>> = (0..n_s)
        .into_par_iter()
        .map(|s| {
            let c0 = at(t0, Some(s));
            solve_all(Some(s))
                .map(|sols| {
                    sols.into_iter()
                        .zip(&central)
                        .map(|(sol, reference)| align(sol, reference, &c0))
                        .collect()
                })
                .map_err(|e| Error::analysis("spectrum", format!("GEVP on resample {s}: {e}")))
        })
        .collect::<Result<_>>()?;
    let scheme = matrix[0][0].scheme;
    let lambda = (0..n)
        .map(|k| {
            (0..n_t)
                .map(|t| {
                    Resampled::new(
                        central[t].eigenvalues[k],
                        samples.iter().map(|s| s[t].eigenvalues[k]).collect(),
                        scheme,
                    )
                })
                .collect()
        })
        .collect();
    let eigenvectors = (0..n)
        .map(|k| {
            (0..n)
                .map(|i| {
                    Resampled::new(
                        central[t_ref].eigenvectors[(i, k)],
                        samples
                            .iter()
                            .map(|s| s[t_ref].eigenvectors[(i, k)])
                            .collect(),
                        scheme,
                    )
                })
                .collect()
        })
        .collect();
    Ok(PrincipalCorrelators {
        t0,
        lambda,
        eigenvectors,
        t_ref,
    })
}

/// The variational analysis at one momentum: principal correlators, eigenvectors and the
/// energies fitted to each principal correlator (same windows, states and model average as
/// the plain fits, with `t_min > t0`).
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct GevpSpectrum {
    /// Operator labels in matrix order (sorted).
    pub operators: Vec<String>,
    /// Reference time.
    pub t0: usize,
    /// Time of the reported eigenvectors.
    pub t_ref: usize,
    /// `eigenvectors[n][i]`: component `i` of state `n` at `t_ref`.
    pub eigenvectors: Vec<Vec<Resampled>>,
    /// Fits to each principal correlator (ground first); `None` where no fit succeeded
    /// (reason in the stage warnings).
    pub states: Vec<Option<super::MomentumSpectrum>>,
}

impl GevpSpectrum {
    /// Energy of state `n` from its principal correlator, when fitted.
    pub fn energy(&self, n: usize) -> Option<&Resampled> {
        self.states.get(n)?.as_ref().map(|s| s.ground_energy())
    }
}

/// Split a correlator-matrix label `src-snk`.
pub fn split_label(label: &str) -> Option<(&str, &str)> {
    let (a, b) = label.split_once('-')?;
    (!a.is_empty() && !b.is_empty()).then_some((a, b))
}

/// Run the variational analysis on the resampled channels `(label, correlator)` of one
/// momentum (labels `src-snk`; every pair of operators must be present).
pub fn analyse(
    momentum: crate::data::Momentum,
    channels: &[(String, Vec<Resampled>)],
    gevp: &super::GevpSettings,
    settings: &super::SpectrumSettings,
    warnings: &mut Vec<String>,
) -> Result<GevpSpectrum> {
    let name = super::label(momentum);
    let mut ops: Vec<String> = Vec::new();
    let mut entries = std::collections::BTreeMap::new();
    for (label, corr) in channels {
        let (a, b) = split_label(label).ok_or_else(|| {
            Error::analysis(
                "spectrum",
                format!("{name}: smear label `{label}` is not of the form `source-sink` needed for a GEVP"),
            )
        })?;
        for o in [a, b] {
            if !ops.iter().any(|x| x == o) {
                ops.push(o.to_string());
            }
        }
        entries.insert((a.to_string(), b.to_string()), corr);
    }
    ops.sort();
    let n = ops.len();
    let mut matrix = Vec::with_capacity(n * n);
    for a in &ops {
        for b in &ops {
            let c = entries
                .get(&(a.clone(), b.clone()))
                .or_else(|| entries.get(&(b.clone(), a.clone())))
                .ok_or_else(|| {
                    Error::analysis(
                        "spectrum",
                        format!("{name}: correlator matrix lacks `{a}-{b}` (operators {ops:?})"),
                    )
                })?;
            matrix.push((*c).clone());
        }
    }
    let pc = principal_correlators(&matrix, n, gevp.t0, gevp.t_ref)
        .map_err(|e| Error::analysis("spectrum", format!("{name}: {e}")))?;
    let fit_settings = super::SpectrumSettings {
        t_min: super::IntRange {
            from: settings.t_min.from.max(gevp.t0 + 1),
            to: settings.t_min.to.max(gevp.t0 + 1),
        },
        periodic: false,
        ..settings.clone()
    };
    let states = pc
        .lambda
        .iter()
        .enumerate()
        .map(
            |(k, lambda)| match super::fit_correlator(momentum, lambda, &fit_settings, warnings) {
                Ok(s) => Some(s),
                Err(e) => {
                    warnings.push(format!("{name}: GEVP state {k} not fitted: {e}"));
                    None
                }
            },
        )
        .collect();
    Ok(GevpSpectrum {
        operators: ops,
        t0: gevp.t0,
        t_ref: gevp.t_ref,
        eigenvectors: pc.eigenvectors,
        states,
    })
}

//! The variational method for a matrix of correlators (docs/methods.md §2; Blossier et al.,
//! JHEP 04 (2009) 094): solve `C(t) v = lambda(t, t0) C(t0) v` by Cholesky reduction
//! `C(t0) = L L^T`, the symmetric eigenproblem of `L^{-1} C(t) L^{-T}`, and `v = L^{-T} u`
//! (so `v^T C(t0) v = 1`). The principal correlators `lambda_n(t, t0) ~ exp(-E_n (t - t0))`
//! are computed per resample; on every sample the states are matched to the central
//! solution by their largest `C(t0)`-overlap and the eigenvector signs are aligned with it,
//! so the ordering and signs are consistent across resamples.
//!
//! Two solutions are kept (docs/methods.md §2): the per-t one (the eigenproblem solved at every
//! `t`, principal correlators `lambda_n(t, t0)`) and the fixed-vector one (the vectors of
//! `t_ref` applied at every `t`: `v_n(t_ref)^T C(t) v_n(t_ref)`, the correlator of the
//! optimised operator `sum_i v_n,i O_i`). Sign convention: the largest-magnitude component of
//! `C(t0) v_n` is positive, so for operators whose overlaps with a state share one sign the
//! optimised operator's overlap has that sign too.

use crate::error::{Error, Result};
use crate::resample::Resampled;
use nalgebra::DMatrix;
use rayon::prelude::*;

/// The solution of one generalized eigenproblem.
#[derive(Clone, Debug, PartialEq)]
pub struct GevpSolution {
    /// Eigenvalues `lambda_n`, largest first (ground state first when `t > t0`).
    pub eigenvalues: Vec<f64>,
    /// Eigenvectors `v_n` as columns, normalised to `v^T C(t0) v = 1`, sign fixed so that the
    /// largest-magnitude component of `C(t0) v_n` is positive.
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
    let metric = sym(c_t0);
    let mut eigenvectors = DMatrix::zeros(n, n);
    for (k, &i) in order.iter().enumerate() {
        let mut v = vecs.column(i).into_owned();
        let w = &metric * &v;
        if w[w.iamax()] < 0.0 {
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
    /// The time whose eigenvectors define the fixed-vector solution.
    pub t_ref: usize,
    /// Per-t solution: `lambda[n][t]`, state `n` (ground first), every time slice `t`
    /// (`lambda[n][t0] = 1`).
    pub lambda: Vec<Vec<Resampled>>,
    /// Fixed-vector solution: `fixed[n][t] = v_n(t_ref)^T C(t) v_n(t_ref)`.
    pub fixed: Vec<Vec<Resampled>>,
    /// `vectors[t][n][i]`: component `i` of `v_n(t)` per resample; `None` at `t = t0`, where
    /// every eigenvalue is 1 and the vectors are not defined.
    pub vectors: Vec<Option<Vec<Vec<Resampled>>>>,
}

impl PrincipalCorrelators {
    /// Component `i` of state `n`'s eigenvector at `t_ref`, per resample.
    pub fn vector_at_ref(&self, n: usize) -> &[Resampled] {
        // `principal_correlators` refuses t_ref == t0, so this entry exists.
        self.vectors[self.t_ref].as_ref().map_or(&[], |v| &v[n])
    }
}

/// One sample's solutions at every time slice (`None` at `t0`) and its fixed-vector
/// correlators.
struct SampleSolution {
    per_t: Vec<Option<GevpSolution>>,
    fixed: Vec<Vec<f64>>,
}

/// Solve one sample (`s = None`: the central value), aligned to `reference` when given.
fn solve_sample(
    at: &dyn Fn(usize) -> DMatrix<f64>,
    n_t: usize,
    t0: usize,
    t_ref: usize,
    reference: Option<&[Option<GevpSolution>]>,
) -> Result<SampleSolution> {
    let c0 = at(t0);
    let mut per_t = Vec::with_capacity(n_t);
    for t in 0..n_t {
        if t == t0 {
            per_t.push(None);
            continue;
        }
        let mut sol = solve(&at(t), &c0)?;
        if t < t0 {
            // Before t0 the eigenvalues grow with the energy: smallest is the ground state.
            sol.eigenvalues.reverse();
            let n = sol.eigenvectors.ncols();
            sol.eigenvectors = DMatrix::from_fn(n, n, |i, k| sol.eigenvectors[(i, n - 1 - k)]);
        }
        per_t.push(Some(match reference.and_then(|r| r[t].as_ref()) {
            Some(r) => align(sol, r, &c0),
            None => sol,
        }));
    }
    let v = per_t[t_ref]
        .as_ref()
        .map(|s| s.eigenvectors.clone())
        .unwrap_or_else(|| DMatrix::identity(c0.nrows(), c0.nrows()));
    let n = v.ncols();
    let fixed = (0..n)
        .map(|k| {
            let col = v.column(k);
            (0..n_t)
                .map(|t| (col.transpose() * at(t) * col)[(0, 0)])
                .collect()
        })
        .collect();
    Ok(SampleSolution { per_t, fixed })
}

/// Principal correlators of an `n x n` correlator matrix given row-major as `matrix[i * n + j]`
/// (element `(sink i, source j)`, each a resampled time series of equal length and
/// resamples). The central value and every sample are solved independently (in parallel,
/// results independent of thread count). `t_ref` must differ from `t0`.
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
        || t_ref == t0
    {
        return Err(Error::analysis(
            "spectrum",
            format!("GEVP: correlators differ in length or resamples, or t0 {t0} / t_ref {t_ref} is outside 0..{n_t} or t_ref equals t0"),
        ));
    }
    let at = |s: Option<usize>| {
        move |t: usize| {
            DMatrix::from_fn(n, n, |i, j| {
                let v = &matrix[i * n + j][t];
                s.map_or(v.central, |s| v.samples[s])
            })
        }
    };
    let central = solve_sample(&at(None), n_t, t0, t_ref, None)?;
    let samples: Vec<SampleSolution> = (0..n_s)
        .into_par_iter()
        .map(|s| {
            solve_sample(&at(Some(s)), n_t, t0, t_ref, Some(&central.per_t))
                .map_err(|e| Error::analysis("spectrum", format!("GEVP on resample {s}: {e}")))
        })
        .collect::<Result<_>>()?;
    let scheme = matrix[0][0].scheme;
    let gather = |get: &dyn Fn(&SampleSolution) -> f64| {
        Resampled::new(get(&central), samples.iter().map(get).collect(), scheme)
    };
    let per_t = |t: usize, f: &dyn Fn(&GevpSolution) -> f64| {
        gather(&|s: &SampleSolution| s.per_t[t].as_ref().map_or(1.0, f))
    };
    let lambda = (0..n)
        .map(|k| (0..n_t).map(|t| per_t(t, &|g| g.eigenvalues[k])).collect())
        .collect();
    let fixed = (0..n)
        .map(|k| (0..n_t).map(|t| gather(&|s| s.fixed[k][t])).collect())
        .collect();
    let vectors = (0..n_t)
        .map(|t| {
            (t != t0).then(|| {
                (0..n)
                    .map(|k| {
                        (0..n)
                            .map(|i| per_t(t, &|g| g.eigenvectors[(i, k)]))
                            .collect()
                    })
                    .collect()
            })
        })
        .collect();
    Ok(PrincipalCorrelators {
        t0,
        t_ref,
        lambda,
        fixed,
        vectors,
    })
}

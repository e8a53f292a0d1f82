//! Linear least squares in closed form (docs/methods.md §2 and §4: correlated constant and line
//! fits). The whitened system `[W A; P] x = [W y; p]` (prior rows `P = diag(1/width)`,
//! `p = mean/width`) is solved by singular value decomposition, never iteratively; the
//! parameter covariance is `V S^{-2} V^T`. A rank-deficient design is an error.

use super::{check_priors, lstsq, p_value, pseudo_inverse, Prior, Weights};
use crate::error::{Error, Result};
use nalgebra::{DMatrix, DVector};

/// A closed-form linear fit.
#[derive(Clone, Debug, PartialEq)]
pub struct LinearFit {
    /// Best-fit parameters.
    pub params: Vec<f64>,
    /// Parameter covariance.
    pub covariance: DMatrix<f64>,
    /// Total chi-square including prior terms.
    pub chi2: f64,
    /// Data points minus parameters.
    pub dof: i64,
    /// p-value of `chi2` for `dof` (NaN for `dof <= 0`).
    pub p_value: f64,
}

impl LinearFit {
    /// Standard error of parameter `k`.
    pub fn error(&self, k: usize) -> f64 {
        self.covariance[(k, k)].sqrt()
    }
}

/// Fit `y ~ design x` (design: one row per point, one column per parameter).
pub fn fit(
    design: &DMatrix<f64>,
    y: &[f64],
    w: &Weights,
    priors: &[Option<Prior>],
) -> Result<LinearFit> {
    let n = design.nrows();
    let np = design.ncols();
    if y.len() != n || w.len() != n || np == 0 {
        return Err(Error::analysis(
            "fit",
            format!(
                "linear fit: design is {n}x{np}, {} data, {} weights; expected equal point counts and at least one parameter",
                y.len(),
                w.len()
            ),
        ));
    }
    check_priors(priors, np).map_err(|m| Error::analysis("fit", m))?;
    if let Some(i) = y.iter().position(|v| !v.is_finite()) {
        return Err(Error::analysis(
            "fit",
            format!("linear fit: data point {i} is {}", y[i]),
        ));
    }
    let active: Vec<(usize, Prior)> = priors
        .iter()
        .enumerate()
        .filter_map(|(k, p)| p.map(|p| (k, p)))
        .collect();
    let rows = n + active.len();
    if rows < np {
        return Err(Error::analysis(
            "fit",
            format!(
                "linear fit: {n} points and {} priors cannot determine {np} parameters",
                active.len()
            ),
        ));
    }
    let mut a = DMatrix::zeros(rows, np);
    a.rows_mut(0, n).copy_from(&w.whiten_matrix(design));
    let mut b = DVector::zeros(rows);
    w.whiten(y, &mut b.as_mut_slice()[..n]);
    for (k, (j, p)) in active.iter().enumerate() {
        a[(n + k, *j)] = 1.0 / p.width;
        b[n + k] = p.mean / p.width;
    }
    let Some((x, covariance)) = lstsq(&a, &b) else {
        return Err(Error::analysis(
            "fit",
            "linear fit: design is rank deficient or not finite; parameters are not determined by the data",
        ));
    };
    let chi2 = (&a * &x - &b).norm_squared();
    let params: Vec<f64> = x.iter().copied().collect();
    let dof = n as i64 - np as i64;
    Ok(LinearFit {
        params,
        covariance,
        chi2,
        dof,
        p_value: p_value(chi2, dof),
    })
}

/// A linear fit whose design matrix and weights are the same for many data vectors (the
/// resamples of a plateau or summation fit): the whitened design `W A` is factorised once and
/// every data vector is solved by one product with the projector `P = (W A)^+ W`, the same
/// solution as [`fit`] up to rounding (the column-scaled SVD of `fit::lstsq`).
#[derive(Clone, Debug)]
pub struct FixedDesign {
    /// `P`, one row per parameter, one column per point.
    projector: DMatrix<f64>,
}

impl FixedDesign {
    /// Factorise `design` (one row per point) with weights `w`. Errors as [`fit`] does for a
    /// rank-deficient or non-finite design or mismatched sizes.
    pub fn new(design: &DMatrix<f64>, w: &Weights) -> Result<FixedDesign> {
        let (n, np) = design.shape();
        if w.len() != n || np == 0 || n < np {
            return Err(Error::analysis(
                "fit",
                format!(
                    "linear fit: design is {n}x{np} with {} weights; expected equal point counts and at least as many points as parameters",
                    w.len()
                ),
            ));
        }
        let pinv = pseudo_inverse(&w.whiten_matrix(design)).ok_or_else(|| {
            Error::analysis(
                "fit",
                "linear fit: design is rank deficient or not finite; parameters are not determined by the data",
            )
        })?;
        // P = A_w^+ W: row j of P is W^T applied to row j of A_w^+.
        let projector = pinv * w.matrix();
        Ok(FixedDesign { projector })
    }

    /// Number of fitted parameters.
    pub fn n_params(&self) -> usize {
        self.projector.nrows()
    }

    /// The parameters for many data vectors at once. `points[i]` holds the values of point
    /// `i` in every data vector (all of one length `m`, e.g. the resamples); the result holds,
    /// per parameter, its `m` values. The sum over points runs in point order, so the result
    /// does not depend on how the caller splits work. A non-finite value is an error naming
    /// the point.
    pub fn solve_many(&self, points: &[&[f64]]) -> Result<Vec<Vec<f64>>> {
        let n = self.projector.ncols();
        let m = points.first().map_or(0, |p| p.len());
        if points.len() != n || points.iter().any(|p| p.len() != m) {
            return Err(Error::analysis(
                "fit",
                format!(
                    "linear fit: {} data points (of unequal lengths?) for a design of {n} points",
                    points.len()
                ),
            ));
        }
        for (i, p) in points.iter().enumerate() {
            if let Some(v) = p.iter().find(|v| !v.is_finite()) {
                return Err(Error::analysis(
                    "fit",
                    format!("linear fit: data point {i} is {v}"),
                ));
            }
        }
        let mut out = vec![vec![0.0; m]; self.n_params()];
        for (j, o) in out.iter_mut().enumerate() {
            for (i, p) in points.iter().enumerate() {
                let c = self.projector[(j, i)];
                for (o, y) in o.iter_mut().zip(p.iter()) {
                    *o += c * y;
                }
            }
        }
        Ok(out)
    }
}

/// Buffers for solving many linear fits whose design changes from one data vector to the next
/// (the fixed-gap two-state fit, whose design depends on the resampled gaps) without
/// allocating per vector: each vector is solved by Householder QR of the column-scaled,
/// whitened design (Golub & Van Loan, "Matrix Computations", 4th ed., §5.2 and §5.3.3). The
/// solution equals [`fit`]'s (column-scaled SVD) up to rounding of order the condition number
/// times the machine epsilon; both are backward stable and neither forms `A^T A`.
#[derive(Clone, Debug)]
pub struct Workspace {
    /// Whitened, column-scaled design, overwritten by its QR factorisation.
    a: DMatrix<f64>,
    /// Whitened data, overwritten by `Q^T W y`.
    b: Vec<f64>,
    /// Column norms of the whitened design.
    scale: Vec<f64>,
}

impl Workspace {
    /// Buffers for designs of `n` points and `np` parameters.
    pub fn new(n: usize, np: usize) -> Workspace {
        Workspace {
            a: DMatrix::zeros(n, np),
            b: vec![0.0; n],
            scale: vec![1.0; np],
        }
    }

    /// Solve `min |W (design x - y)|` into `out` (one value per parameter). Errors as [`fit`]
    /// does for mismatched sizes, a non-finite data point, or a rank-deficient or non-finite
    /// design (the smallest diagonal of `R` below `1e-13` times the largest, the column-scaled
    /// analogue of [`fit`]'s singular-value ratio).
    pub fn solve(
        &mut self,
        design: &DMatrix<f64>,
        y: &[f64],
        w: &Weights,
        out: &mut [f64],
    ) -> Result<()> {
        let (n, np) = self.a.shape();
        if design.shape() != (n, np) || y.len() != n || w.len() != n || out.len() != np {
            return Err(Error::analysis(
                "fit",
                format!(
                    "linear fit: design is {}x{}, {} data, {} weights, {} outputs; expected a {n}x{np} design",
                    design.nrows(),
                    design.ncols(),
                    y.len(),
                    w.len(),
                    out.len()
                ),
            ));
        }
        if let Some(i) = y.iter().position(|v| !v.is_finite()) {
            return Err(Error::analysis(
                "fit",
                format!("linear fit: data point {i} is {}", y[i]),
            ));
        }
        let deficient = || {
            Error::analysis(
                "fit",
                "linear fit: design is rank deficient or not finite; parameters are not determined by the data",
            )
        };
        if np == 0 || n < np {
            return Err(deficient());
        }
        w.whiten_into(design, &mut self.a);
        w.whiten(y, &mut self.b);
        let a = self.a.as_mut_slice();
        for (j, s) in self.scale.iter_mut().enumerate() {
            let col = &mut a[j * n..(j + 1) * n];
            let norm = col.iter().map(|x| x * x).sum::<f64>().sqrt();
            if !norm.is_finite() {
                return Err(deficient());
            }
            *s = if norm > 0.0 { norm } else { 1.0 };
            let inv = 1.0 / *s;
            col.iter_mut().for_each(|x| *x *= inv);
        }
        // Householder QR, the reflectors applied to the remaining columns and to b at once.
        let mut rmax = 0.0f64;
        let mut rmin = f64::INFINITY;
        for j in 0..np {
            let (done, rest) = a.split_at_mut((j + 1) * n);
            let v = &mut done[j * n + j..];
            let norm = v.iter().map(|x| x * x).sum::<f64>().sqrt();
            let alpha = if v[0] > 0.0 { -norm } else { norm };
            let (rabs, v0) = (alpha.abs(), v[0] - alpha);
            rmax = rmax.max(rabs);
            rmin = rmin.min(rabs);
            if rabs == 0.0 {
                return Err(deficient());
            }
            v[0] = v0;
            // H = I - 2 v v^T / (v^T v), v^T v = 2 norm (norm + |a_jj|) = -2 alpha v0.
            let vtv = -alpha * v0;
            for c in rest.chunks_mut(n) {
                let c = &mut c[j..];
                let f = v.iter().zip(c.iter()).map(|(p, q)| p * q).sum::<f64>() / vtv;
                c.iter_mut().zip(v.iter()).for_each(|(q, p)| *q -= f * p);
            }
            let bj = &mut self.b[j..];
            let f = v.iter().zip(bj.iter()).map(|(p, q)| p * q).sum::<f64>() / vtv;
            bj.iter_mut().zip(v.iter()).for_each(|(q, p)| *q -= f * p);
            v[0] = alpha;
        }
        // A NaN ratio counts as deficient too.
        if rmin.partial_cmp(&(rmax * 1e-13)) != Some(std::cmp::Ordering::Greater) {
            return Err(deficient());
        }
        // Back substitution R x = (Q^T b)[..np], then undo the column scaling.
        for j in (0..np).rev() {
            let mut v = self.b[j];
            for (k, o) in out.iter().enumerate().skip(j + 1) {
                v -= a[k * n + j] * o;
            }
            out[j] = v / a[j * n + j];
        }
        for (o, s) in out.iter_mut().zip(&self.scale) {
            *o /= s;
        }
        Ok(())
    }
}

/// Many small weighted least-squares fits with uncorrelated weights (at most
/// [`Uncorrelated::MAX_PARAMS`] parameters): the plateau, summation and fixed-gap two-state
/// fits of every resample, each with its own row weights. Each is solved by the normal
/// equations of the column-scaled whitened design, `B^T B x = B^T c` with `B = diag(r) A` and
/// `c = diag(r) y`, by Cholesky, followed by one step of iterative refinement on the residual
/// (the corrected semi-normal equations of Björck, "Numerical Methods for Least Squares
/// Problems", SIAM 1996, §2.2.5 and §6.6.5), in one pass over the rows. That is accurate to
/// about the condition number of `B` times the machine epsilon as long as the squared
/// condition number times the epsilon stays well below one, so a fit whose column-scaled
/// Cholesky pivots span more than [`Uncorrelated::MAX_PIVOT_SPAN`] (or with anything not
/// finite) is left to [`Workspace`]'s QR, which also decides and words every error: the
/// results agree with it to rounding (unit tests below).
#[derive(Clone, Debug)]
pub struct Uncorrelated {
    n: usize,
    k: usize,
    /// The whitened design `B`, row-major, kept for the refinement.
    b: Vec<f64>,
    /// The whitened data `c`.
    c: Vec<f64>,
}

impl Uncorrelated {
    /// Most parameters handled (the two-state fit's four).
    pub const MAX_PARAMS: usize = 4;
    /// Largest ratio of the column-scaled Cholesky pivots (a condition number of the scaled
    /// design) solved here; above it the QR path decides.
    pub const MAX_PIVOT_SPAN: f64 = 1e4;

    /// Buffers for `n` points and `k` parameters; `None` unless `1 <= k <= MAX_PARAMS` and
    /// `n >= k`.
    pub fn new(n: usize, k: usize) -> Option<Uncorrelated> {
        ((1..=Self::MAX_PARAMS).contains(&k) && n >= k).then(|| Uncorrelated {
            n,
            k,
            b: vec![0.0; n * k],
            c: vec![0.0; n],
        })
    }

    /// Solve `min sum_i (r_i (design x - y)_i)^2` into `out`; `false` (with `out` unspecified)
    /// when the fit is left to the QR path: sizes that do not match, a non-finite value, a
    /// singular or badly conditioned scaled design.
    pub fn try_solve(
        &mut self,
        design: &DMatrix<f64>,
        y: &[f64],
        row_weights: &[f64],
        out: &mut [f64],
    ) -> bool {
        let n = self.n;
        if design.shape() != (n, self.k)
            || y.len() != n
            || row_weights.len() != n
            || out.len() != self.k
        {
            return false;
        }
        match self.k {
            1 => self.solve_k::<1>(design.as_slice(), y, row_weights, out),
            2 => self.solve_k::<2>(design.as_slice(), y, row_weights, out),
            3 => self.solve_k::<3>(design.as_slice(), y, row_weights, out),
            4 => self.solve_k::<4>(design.as_slice(), y, row_weights, out),
            _ => false,
        }
    }

    fn solve_k<const K: usize>(
        &mut self,
        a: &[f64],
        y: &[f64],
        r: &[f64],
        out: &mut [f64],
    ) -> bool {
        let n = self.n;
        // B row-major (one row of K per point), so the passes below run over whole rows.
        for (j, column) in a.chunks_exact(n).take(K).enumerate() {
            for (row, v) in self.b.chunks_exact_mut(K).zip(column) {
                row[j] = *v;
            }
        }
        // One pass over the rows: B, c, the upper triangle of B^T B and B^T c.
        let mut g = [[0.0f64; K]; K];
        let mut h = [0.0f64; K];
        for ((row, c), (ri, yi)) in self
            .b
            .chunks_exact_mut(K)
            .zip(self.c.iter_mut())
            .zip(r.iter().zip(y))
        {
            let Ok(row) = <&mut [f64; K]>::try_from(row) else {
                return false;
            };
            for v in row.iter_mut() {
                *v *= ri;
            }
            *c = ri * yi;
            for j in 0..K {
                h[j] += row[j] * *c;
                for l in j..K {
                    g[j][l] += row[j] * row[l];
                }
            }
        }
        let Some((chol, scale, x)) = factor_and_solve::<K>(&g, &h) else {
            return false;
        };
        // One refinement step: the residual in the original (whitened) rows.
        let mut h2 = [0.0f64; K];
        for (row, c) in self.b.chunks_exact(K).zip(&self.c) {
            let Ok(row) = <&[f64; K]>::try_from(row) else {
                return false;
            };
            let mut res = *c;
            for (bj, xj) in row.iter().zip(&x) {
                res -= bj * xj;
            }
            for (hj, bj) in h2.iter_mut().zip(row) {
                *hj += bj * res;
            }
        }
        let rhs = nalgebra::SVector::<f64, K>::from_fn(|j, _| h2[j] / scale[j]);
        let dz = chol.solve(&rhs);
        for (j, o) in out.iter_mut().enumerate() {
            *o = x[j] + dz[j] / scale[j];
        }
        out.iter().all(|v| v.is_finite())
    }
}

/// Every resample of a fit whose design is the same for all of them and whose uncorrelated
/// weights differ per resample (the plateau and summation fits of a jackknife run, each
/// resample weighting its points by its own errors): [`Uncorrelated`]'s normal equations and
/// refinement step for all resamples at once. `y[i]` holds point `i`'s value in every
/// resample, `r[i]` its row weight in every resample (all of one length `m`); on return
/// `out[j][s]` is parameter `j` of resample `s` where `solved[s]` is true. A resample left
/// unsolved (the cases [`Uncorrelated::try_solve`] leaves, or sizes that do not match) is for
/// the caller's QR path. The sums over points run in point order, the same for every
/// resample, so results do not depend on how work is split.
pub fn solve_fixed_uncorrelated(
    design: &DMatrix<f64>,
    y: &[&[f64]],
    r: &[&[f64]],
    out: &mut [Vec<f64>],
) -> Vec<bool> {
    let m = y.first().map_or(0, |v| v.len());
    let (n, k) = design.shape();
    let fits = y.len() == n
        && r.len() == n
        && out.len() == k
        && y.iter().chain(r).all(|v| v.len() == m)
        && n >= k;
    if !fits {
        return vec![false; m];
    }
    for o in out.iter_mut() {
        o.clear();
        o.resize(m, 0.0);
    }
    match k {
        1 => fixed_batch::<1>(design, y, r, out),
        2 => fixed_batch::<2>(design, y, r, out),
        3 => fixed_batch::<3>(design, y, r, out),
        4 => fixed_batch::<4>(design, y, r, out),
        _ => vec![false; m],
    }
}

/// [`solve_fixed_uncorrelated`] for `K` parameters: the Gram matrices `sum_i r_i^2 a_i a_i^T`
/// and right-hand sides of every resample accumulated point by point (one pass of `axpy`s
/// over the resamples), then per resample [`Uncorrelated`]'s column scaling, Cholesky and pivot
/// check, then one refinement pass over the points.
fn fixed_batch<const K: usize>(
    design: &DMatrix<f64>,
    y: &[&[f64]],
    r: &[&[f64]],
    out: &mut [Vec<f64>],
) -> Vec<bool> {
    let m = y[0].len();
    let n = design.nrows();
    let pairs: Vec<(usize, usize)> = (0..K).flat_map(|j| (j..K).map(move |l| (j, l))).collect();
    let mut gram = vec![vec![0.0; m]; pairs.len()];
    let mut rhs = vec![vec![0.0; m]; K];
    let mut w = vec![0.0; m];
    let mut wy = vec![0.0; m];
    for i in 0..n {
        for ((w, wy), (ri, yi)) in w.iter_mut().zip(wy.iter_mut()).zip(r[i].iter().zip(y[i])) {
            *w = ri * ri;
            *wy = *w * yi;
        }
        for (g, &(j, l)) in gram.iter_mut().zip(&pairs) {
            let p = design[(i, j)] * design[(i, l)];
            g.iter_mut().zip(&w).for_each(|(g, w)| *g += w * p);
        }
        for (h, j) in rhs.iter_mut().zip(0..K) {
            let a = design[(i, j)];
            h.iter_mut().zip(&wy).for_each(|(h, wy)| *h += wy * a);
        }
    }
    let mut factors: Vec<Option<(SmallCholesky<K>, [f64; K])>> = Vec::with_capacity(m);
    for s in 0..m {
        let mut g = [[0.0f64; K]; K];
        for (e, &(j, l)) in pairs.iter().enumerate() {
            g[j][l] = gram[e][s];
        }
        let h: [f64; K] = std::array::from_fn(|j| rhs[j][s]);
        let solved = factor_and_solve::<K>(&g, &h);
        if let Some((_, _, x)) = &solved {
            for (o, xj) in out.iter_mut().zip(x) {
                o[s] = *xj;
            }
        }
        factors.push(solved.map(|(chol, scale, _)| (chol, scale)));
    }
    // One refinement step: B^T (c - B x) = sum_i r_i^2 a_i (y_i - a_i . x), per resample.
    for h in rhs.iter_mut() {
        h.iter_mut().for_each(|v| *v = 0.0);
    }
    let mut res = vec![0.0; m];
    for i in 0..n {
        let a: [f64; K] = std::array::from_fn(|j| design[(i, j)]);
        for (s, (res, (ri, yi))) in res.iter_mut().zip(r[i].iter().zip(y[i])).enumerate() {
            let mut v = *yi;
            for (j, aj) in a.iter().enumerate() {
                v -= aj * out[j][s];
            }
            *res = ri * ri * v;
        }
        for (h, aj) in rhs.iter_mut().zip(a) {
            h.iter_mut().zip(&res).for_each(|(h, res)| *h += res * aj);
        }
    }
    let mut solved = vec![false; m];
    for (s, f) in factors.iter().enumerate() {
        let Some((chol, scale)) = f else {
            continue;
        };
        let v = nalgebra::SVector::<f64, K>::from_fn(|j, _| rhs[j][s] / scale[j]);
        let dz = chol.solve(&v);
        let mut finite = true;
        for (j, o) in out.iter_mut().enumerate() {
            o[s] += dz[j] / scale[j];
            finite &= o[s].is_finite();
        }
        solved[s] = finite;
    }
    solved
}

/// The Cholesky factor of a `K x K` scaled Gram matrix.
type SmallCholesky<const K: usize> = nalgebra::Cholesky<f64, nalgebra::Const<K>>;

/// Column scaling, Cholesky and pivot check of the Gram matrix `g` (upper triangle), and the
/// solution for right-hand side `h`: what [`Uncorrelated::try_solve`] does before its
/// refinement. `None` where it leaves the fit to QR.
fn factor_and_solve<const K: usize>(
    g: &[[f64; K]; K],
    h: &[f64; K],
) -> Option<(SmallCholesky<K>, [f64; K], [f64; K])> {
    let mut scale = [0.0f64; K];
    for (j, s) in scale.iter_mut().enumerate() {
        let d = g[j][j];
        if !(d > 0.0 && d.is_finite()) {
            return None;
        }
        *s = d.sqrt();
    }
    let gram = nalgebra::SMatrix::<f64, K, K>::from_fn(|j, l| {
        let (p, q) = if j <= l { (j, l) } else { (l, j) };
        g[p][q] / (scale[p] * scale[q])
    });
    let chol = gram.cholesky()?;
    let pivots = chol.l_dirty().diagonal();
    let (lo, hi) = pivots.iter().fold((f64::INFINITY, 0.0f64), |(lo, hi), &p| {
        (lo.min(p), hi.max(p))
    });
    if !(lo > 0.0 && hi.is_finite() && lo * Uncorrelated::MAX_PIVOT_SPAN >= hi) {
        return None;
    }
    let rhs = nalgebra::SVector::<f64, K>::from_fn(|j, _| h[j] / scale[j]);
    let z = chol.solve(&rhs);
    let x = std::array::from_fn(|j| z[j] / scale[j]);
    Some((chol, scale, x))
}

/// Correlated constant fit `y_i = c` (the plateau, docs/methods.md §4).
pub fn constant(y: &[f64], w: &Weights) -> Result<LinearFit> {
    fit(&DMatrix::from_element(y.len(), 1, 1.0), y, w, &[])
}

/// Correlated straight line `y_i = a + b x_i`; parameters `[a, b]`.
pub fn line(x: &[f64], y: &[f64], w: &Weights) -> Result<LinearFit> {
    if x.len() != y.len() {
        return Err(Error::analysis(
            "fit",
            format!("line fit: {} abscissae for {} data", x.len(), y.len()),
        ));
    }
    let design = DMatrix::from_fn(x.len(), 2, |i, j| if j == 0 { 1.0 } else { x[i] });
    fit(&design, y, w, &[])
}

//! Many small linear least-squares fits with uncorrelated weights, by the normal equations:
//! the resamples of the ratio stage's plateau, summation and fixed-gap two-state fits, each
//! resample with its own row weights. Re-exported by [`super::linear`], whose QR
//! [`Workspace`](super::linear::Workspace) takes what these leave.

use nalgebra::DMatrix;

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
/// finite) is left to [`Workspace`](super::linear::Workspace)'s QR, which also decides and words every error: the
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
        1 => fixed_constant_batch(design, y, r, out),
        2 => fixed_batch::<2>(design, y, r, out),
        3 => fixed_batch::<3>(design, y, r, out),
        4 => fixed_batch::<4>(design, y, r, out),
        _ => vec![false; m],
    }
}

/// [`solve_fixed_uncorrelated`] for one parameter (a plateau: `a_i = 1`, or any fixed
/// column): `x = sum_i r_i^2 a_i y_i / sum_i r_i^2 a_i^2` per resample, then the same
/// refinement step, in closed form (the Cholesky factor of a 1 x 1 scaled Gram matrix is 1).
fn fixed_constant_batch(
    design: &DMatrix<f64>,
    y: &[&[f64]],
    r: &[&[f64]],
    out: &mut [Vec<f64>],
) -> Vec<bool> {
    let m = y[0].len();
    let a = design.column(0);
    let mut g = vec![0.0; m];
    let mut h = vec![0.0; m];
    for (&ai, (yi, ri)) in a.iter().zip(y.iter().zip(r)) {
        for ((g, h), (yv, rv)) in g.iter_mut().zip(h.iter_mut()).zip(yi.iter().zip(*ri)) {
            let b = rv * ai;
            *g += b * b;
            *h += b * (rv * yv);
        }
    }
    let Some(x) = out.first_mut() else {
        return vec![false; m];
    };
    for ((x, g), h) in x.iter_mut().zip(&g).zip(&h) {
        *x = h / g;
    }
    // Refinement: sum_i b_i (c_i - b_i x) / g.
    let mut h2 = vec![0.0; m];
    for (&ai, (yi, ri)) in a.iter().zip(y.iter().zip(r)) {
        for ((h2, x), (yv, rv)) in h2.iter_mut().zip(x.iter()).zip(yi.iter().zip(*ri)) {
            let b = rv * ai;
            *h2 += b * (rv * yv - b * x);
        }
    }
    x.iter_mut()
        .zip(&g)
        .zip(&h2)
        .map(|((x, g), h2)| {
            *x += h2 / g;
            *g > 0.0 && g.is_finite() && x.is_finite()
        })
        .collect()
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

//! Every resample of a shell whose channels determine all its form factors: the whitened
//! system solved by the normal equations ([`Uncorrelated`]: Cholesky of the column-scaled Gram
//! matrix and one refinement step, Björck's corrected semi-normal equations) in buffers
//! reused over the resamples a thread takes, instead of an SVD per resample.
//!
//! The SVD of [`super::solve`] cuts a singular direction only below [`SINGULAR_THRESHOLD`]
//! (1e-8) of the largest; when the whitened matrix's condition number is at most
//! [`MAX_CONDITION`] no direction is cut there, and both give the one least-squares solution,
//! the normal equations to about the condition number times the machine epsilon (both
//! backward stable for such a matrix). A resample is solved here only when a bound on its
//! condition number from its `k x k` Gram matrix is at most that, the solver's own
//! pivot check passes and every value is finite; any other resample (a non-finite energy or
//! matrix element, a coefficient that could not be computed, a badly conditioned system) goes
//! to the SVD path, which decides the cut and words every error.

use super::cache::Coefficients;
use super::SINGULAR_THRESHOLD;
use crate::fit::linear::Uncorrelated;
use crate::fit::Weights;
use nalgebra::{Complex, DMatrix, SMatrix};

/// Largest condition number (largest over smallest singular value) of a resample's whitened
/// coefficient matrix solved by the normal equations. Its square times the machine epsilon
/// (2e-8) keeps the Cholesky factor accurate, and it lies far inside the SVD's cut
/// (`1 / SINGULAR_THRESHOLD` = 1e8), so no resample solved here would have lost a direction
/// there.
pub(super) const MAX_CONDITION: f64 = 1e4;

// The cut of the SVD path must lie beyond what is solved here.
const _: () = assert!(MAX_CONDITION * SINGULAR_THRESHOLD < 1e-3);

/// One row of the shell's system: the coefficients of its channel on every resample, which
/// part it takes, and its data on every resample.
pub(super) struct RowSource<'a> {
    /// The channel's coefficients per resample (every form factor of the current).
    pub coefficients: &'a [Coefficients],
    /// Imaginary (true) or real part.
    pub imag: bool,
    /// The row's data per resample.
    pub data: &'a [f64],
}

/// The per-resample solver of one shell.
pub(super) struct FastSolver<'a> {
    rows: Vec<RowSource<'a>>,
    /// Indices of the unknowns among the current's form factors (columns).
    unknowns: &'a [usize],
    weights: &'a Weights,
    /// The solver's buffers of this size, copied into each thread's [`Buffers`].
    solver: Uncorrelated,
}

/// Buffers of one thread: the coefficient matrix, the data, their whitened forms, unit row
/// weights (the rows are whitened beforehand, so the solver's own row weights are one) and
/// the solver's own buffers.
pub(super) struct Buffers {
    design: DMatrix<f64>,
    y: Vec<f64>,
    whitened: DMatrix<f64>,
    wy: Vec<f64>,
    ones: Vec<f64>,
    solver: Uncorrelated,
}

impl<'a> FastSolver<'a> {
    /// The solver of a shell with these rows and unknowns; `None` when the solver does not
    /// take its size (more than [`Uncorrelated::MAX_PARAMS`] unknowns, fewer rows than
    /// unknowns) or the weights do not have one row per equation.
    pub(super) fn new(
        rows: Vec<RowSource<'a>>,
        unknowns: &'a [usize],
        weights: &'a Weights,
    ) -> Option<Self> {
        if weights.len() != rows.len() {
            return None;
        }
        let solver = Uncorrelated::new(rows.len(), unknowns.len())?;
        Some(FastSolver {
            rows,
            unknowns,
            weights,
            solver,
        })
    }

    /// Buffers for one thread's resamples.
    pub(super) fn buffers(&self) -> Buffers {
        let (n, k) = (self.rows.len(), self.unknowns.len());
        Buffers {
            design: DMatrix::zeros(n, k),
            y: vec![0.0; n],
            whitened: DMatrix::zeros(n, k),
            wy: vec![0.0; n],
            ones: vec![1.0; n],
            solver: self.solver.clone(),
        }
    }

    /// Solve resample `s` into `out` (one value per unknown); `false` (with `out`
    /// unspecified) when it is left to the SVD path.
    pub(super) fn solve(&self, s: usize, buf: &mut Buffers, out: &mut [f64]) -> bool {
        for (r, row) in self.rows.iter().enumerate() {
            let (Some(Ok(kc)), Some(&y)) = (row.coefficients.get(s), row.data.get(s)) else {
                return false;
            };
            for (col, &j) in self.unknowns.iter().enumerate() {
                let z: Complex<f64> = match kc.get(j) {
                    Some(z) => *z,
                    None => return false,
                };
                buf.design[(r, col)] = if row.imag { z.im } else { z.re };
            }
            buf.y[r] = y;
        }
        // The same whitening as the SVD path (`Weights::whiten_matrix`, `Weights::whiten`).
        self.weights.whiten_into(&buf.design, &mut buf.whitened);
        self.weights.whiten(&buf.y, &mut buf.wy);
        let conditioned = match self.unknowns.len() {
            1 => well_conditioned::<1>(&buf.whitened),
            2 => well_conditioned::<2>(&buf.whitened),
            3 => well_conditioned::<3>(&buf.whitened),
            4 => well_conditioned::<4>(&buf.whitened),
            _ => false,
        };
        conditioned
            && buf.wy.iter().all(|v| v.is_finite())
            && buf.solver.try_solve(&buf.whitened, &buf.wy, &buf.ones, out)
    }
}

/// True when the `n x K` matrix `b` is finite and its condition number is at most
/// [`MAX_CONDITION`], by the bound `cond(b)^2 = lambda_max / lambda_min <= trace(G)
/// trace(G^-1)` for the Gram matrix `G = b^T b` (`trace(G) >= lambda_max`, `trace(G^-1) >=
/// 1 / lambda_min`; the bound is at most `K^2` times the squared condition number). `G^-1`
/// comes from the Cholesky factor of `G`, accurate to about the squared condition number
/// times the epsilon (below 1e-8 wherever the test passes), so the test is reliable.
fn well_conditioned<const K: usize>(b: &DMatrix<f64>) -> bool {
    if b.ncols() != K || b.iter().any(|v| !v.is_finite()) {
        return false;
    }
    let mut g = SMatrix::<f64, K, K>::zeros();
    for j in 0..K {
        for l in j..K {
            let v = b.column(j).dot(&b.column(l));
            g[(j, l)] = v;
            g[(l, j)] = v;
        }
    }
    if g.iter().any(|v| !v.is_finite()) {
        return false;
    }
    let Some(chol) = g.cholesky() else {
        return false;
    };
    let bound = g.trace() * chol.inverse().trace();
    bound.is_finite() && bound > 0.0 && bound <= MAX_CONDITION * MAX_CONDITION
}

#[cfg(test)]
mod tests {
    use super::*;

    // Source: NIST StRD linear regression, Norris (tests/fixtures/fit; certified B0, B1).
    // The design is (1, x / 512) so that the system lies inside the condition limit (the
    // power of two keeps the data exact: the certified slope becomes 512 B1), given as the
    // real parts of the coefficients of two resamples; unit weights.
    #[test]
    fn norris_through_the_per_resample_solver() {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/fixtures/fit");
        let read = |name: &str| std::fs::read_to_string(format!("{dir}/{name}")).expect(name);
        let points: Vec<(f64, f64)> = read("Norris.csv")
            .lines()
            .skip(1)
            .filter_map(|l| {
                let (x, y) = l.split_once(',')?;
                Some((x.trim().parse().ok()?, y.trim().parse().ok()?))
            })
            .collect();
        assert_eq!(points.len(), 36);
        let certified = read("Norris.certified.csv");
        let value = |name: &str| -> f64 {
            certified
                .lines()
                .find_map(|l| {
                    let mut f = l.split(',');
                    (f.next()? == name).then(|| f.next()?.trim().parse().ok())?
                })
                .expect(name)
        };
        let coefficients: Vec<Vec<Coefficients>> = points
            .iter()
            .map(|(x, _)| {
                let row = vec![Complex::new(1.0, 0.0), Complex::new(x / 512.0, 0.0)];
                vec![Ok(row.clone()), Ok(row)]
            })
            .collect();
        let data: Vec<[f64; 2]> = points.iter().map(|(_, y)| [*y, *y]).collect();
        let rows = coefficients
            .iter()
            .zip(&data)
            .map(|(c, d)| RowSource {
                coefficients: c,
                imag: false,
                data: d,
            })
            .collect();
        let weights = Weights::unit(points.len());
        let solver = FastSolver::new(rows, &[0, 1], &weights).expect("2 unknowns");
        let mut buffers = solver.buffers();
        for s in 0..2 {
            let mut out = [0.0; 2];
            assert!(solver.solve(s, &mut buffers, &mut out));
            let b0 = value("B0");
            let b1 = 512.0 * value("B1");
            assert!((out[0] - b0).abs() <= 1e-9 * b0.abs(), "{out:?}");
            assert!((out[1] - b1).abs() <= 1e-9 * b1.abs(), "{out:?}");
        }
        // Imaginary parts, zero everywhere, make the matrix zero: left to the SVD path, as
        // is a resample whose coefficients could not be computed.
        let zero: Vec<RowSource> = coefficients
            .iter()
            .zip(&data)
            .map(|(c, d)| RowSource {
                coefficients: c,
                imag: true,
                data: d,
            })
            .collect();
        let weights = Weights::unit(36);
        let solver = FastSolver::new(zero, &[0, 1], &weights).expect("2 unknowns");
        let mut out = [0.0; 2];
        assert!(!solver.solve(0, &mut buffers, &mut out));
        let failed: Vec<Coefficients> = vec![Err("no energy".into()), Err("no energy".into())];
        let rows: Vec<RowSource> = (0..36)
            .map(|i| RowSource {
                coefficients: if i == 3 { &failed } else { &coefficients[i] },
                imag: false,
                data: &data[i],
            })
            .collect();
        let solver = FastSolver::new(rows, &[0, 1], &weights).expect("2 unknowns");
        assert!(!solver.solve(0, &mut buffers, &mut out));
        assert!(FastSolver::new(Vec::new(), &[0, 1], &Weights::unit(0)).is_none());
    }

    #[test]
    fn the_condition_test_follows_the_singular_values() {
        // Columns (1, 0, 0) and (1, t, 0): Gram matrix [[1, 1], [1, 1 + t^2]], condition
        // about 2 / t for small t, the bound trace(G) trace(G^-1) = (2 + t^2)^2 / t^2.
        let with = |t: f64| DMatrix::from_row_slice(3, 2, &[1.0, 1.0, 0.0, t, 0.0, 0.0]);
        assert!(well_conditioned::<2>(&with(1.0)));
        assert!(well_conditioned::<2>(&with(1e-3)));
        assert!(!well_conditioned::<2>(&with(1e-5)));
        assert!(!well_conditioned::<2>(&with(0.0)));
        let mut nan = with(1.0);
        nan[(2, 1)] = f64::NAN;
        assert!(!well_conditioned::<2>(&nan));
        let zero = DMatrix::<f64>::zeros(3, 1);
        assert!(!well_conditioned::<1>(&zero));
        assert!(well_conditioned::<1>(&DMatrix::from_element(3, 1, 2.0)));
    }
}

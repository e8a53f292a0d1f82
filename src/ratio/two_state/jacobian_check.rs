//! Test helper shared by the two-state fit models: their analytic Jacobians against finite
//! differences.

use crate::fit::Model;
use approx::assert_relative_eq;
use nalgebra::DMatrix;

/// Assert that `model`'s analytic Jacobian at `params` matches central finite
/// differences (step 1e-6; common practice).
pub(crate) fn assert_jacobian_matches(model: &impl Model, params: &[f64]) {
    let (n, k) = (model.n_points(), model.n_params());
    assert_eq!(params.len(), k);
    let mut jac = DMatrix::zeros(n, k);
    model.jacobian(params, &mut jac);
    let (mut up, mut down) = (vec![0.0; n], vec![0.0; n]);
    for j in 0..k {
        let h = 1e-6;
        let mut p = params.to_vec();
        p[j] += h;
        model.eval(&p, &mut up);
        p[j] -= 2.0 * h;
        model.eval(&p, &mut down);
        for i in 0..n {
            let fd = (up[i] - down[i]) / (2.0 * h);
            assert_relative_eq!(jac[(i, j)], fd, epsilon = 1e-7, max_relative = 1e-6);
        }
    }
}

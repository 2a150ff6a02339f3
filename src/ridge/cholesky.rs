//! Ridge by Cholesky factorisation of the penalised Gram matrix.

use faer::Mat;

use crate::error::{Error, Result};
use crate::linalg::{cholesky as chol, triangular};
use crate::observe::{Stage, Watch};
use crate::passes::gram::centered_gram;
use crate::penalty::PenaltyMap;
use crate::prep::Scaling;
use crate::problem::Problem;

use super::Solution;

/// Forms `G = Z^T Z` (with `Z^T t`) in one pass, makes the penalty uniform
/// with the column factors `f` of [`PenaltyMap`], and factors
/// `diag(f) G diag(f) + mu I = L L^T`.
pub(super) fn solve(
    problem: &Problem<'_>,
    scaling: &Scaling,
    standardize: bool,
    lambda: f64,
    watch: &Watch<'_>,
) -> Result<Solution> {
    let p = problem.columns();
    // The Gram matrix, its penalised copy and the factor.
    crate::alloc::reserve_matrices("penalised Gram matrix", p + 1, p + 1, 3)?;
    watch.begin(Stage::Factor, problem.rows());
    let g = centered_gram(problem, scaling, true, watch)?;
    let norms: Option<Vec<f64>> = standardize.then(|| (0..p).map(|j| g[(j, j)]).collect());
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let mu = map.scaled(lambda);
    let f = &map.factors;
    // The design's condition from its Gram matrix (before the penalty).
    let design_condition = crate::linalg::svd::condition_from_gram(
        g.as_ref().submatrix(0, 0, p, p),
        problem.default_rank_tolerance(),
    )?;
    let mut a = Mat::<f64>::from_fn(p, p, |i, j| (f[i] * g[(i, j)]) * f[j]);
    for j in 0..p {
        // A column that takes no part has a zero row and column: a unit
        // pivot keeps the system regular and its coefficient at zero.
        a[(j, j)] += if map.is_live(j) { mu } else { 1.0 };
    }
    let l = match chol::factor(a.as_ref()) {
        chol::Factor::Ok(l) => l,
        chol::Factor::Failed { pivot } => {
            return Err(Error::NotPositiveDefinite {
                pivot,
                value: a[(pivot, pivot)],
            })
        }
    };
    let mut gamma: Vec<f64> = (0..p).map(|j| f[j] * g[(j, p)]).collect();
    triangular::solve_lower(l.as_ref(), &mut gamma);
    triangular::solve_upper(l.as_ref().transpose(), &mut gamma);
    Ok(Solution {
        beta: map.to_caller(scaling, &gamma),
        design_condition: Some(design_condition),
        system_condition: triangular::condition_lower(l.as_ref()),
        method: "cholesky",
    })
}

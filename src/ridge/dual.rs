//! Ridge through the dual system of the rows, for designs with more
//! columns than rows.

use crate::error::{Error, Result};
use crate::linalg::{cholesky as chol, dual, triangular};
use crate::penalty::PenaltyMap;
use crate::prep::Scaling;
use crate::problem::Problem;

use super::Solution;

/// With the uniform-penalty design `Ẑ` (see [`PenaltyMap`]) over the rows
/// with non-zero weight, `gamma^ = Ẑ^T (Ẑ Ẑ^T + mu I)^-1 t`: one pass
/// forms the `n_u x n_u` row Gram by column blocks, a Cholesky factor
/// solves the system, one more pass forms `Ẑ^T alpha`. Standardised
/// columns need their norms first (one cheap extra pass).
pub(super) fn solve(
    problem: &Problem<'_>,
    scaling: &Scaling,
    standardize: bool,
    lambda: f64,
) -> Result<Solution> {
    let rows: Vec<usize> = (0..problem.rows())
        .filter(|&i| problem.scaled_weight(i) > 0.0)
        .collect();
    let norms = standardize.then(|| dual::column_sq_norms(problem, scaling));
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let mu = map.scaled(lambda);
    let dual::RowGram { mut gram, target } = dual::row_gram(problem, scaling, &map.factors, &rows);
    for i in 0..rows.len() {
        gram[(i, i)] += mu;
    }
    let l = match chol::factor(gram.as_ref()) {
        chol::Factor::Ok(l) => l,
        chol::Factor::Failed { pivot } => {
            return Err(Error::NotPositiveDefinite {
                pivot,
                value: gram[(pivot, pivot)],
            })
        }
    };
    let mut alpha = target;
    triangular::solve_lower(l.as_ref(), &mut alpha);
    triangular::solve_upper(l.as_ref().transpose(), &mut alpha);
    let gamma = dual::transpose_times(problem, scaling, &map.factors, &rows, &alpha);
    Ok(Solution {
        beta: map.to_caller(scaling, &gamma),
        condition: triangular::condition_lower(l.as_ref()),
        live: map.live(),
        method: "dual",
    })
}

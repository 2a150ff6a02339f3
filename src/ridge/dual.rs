//! Ridge through the dual system of the rows, for designs with more
//! columns than rows.

use crate::error::{Error, Result};
use crate::linalg::{cholesky as chol, triangular};
use crate::observe::Watch;
use crate::passes::dual;
use crate::penalty::PenaltyMap;
use crate::prep::Scaling;
use crate::problem::Problem;

use super::Solution;

/// Bytes of row system accepted on a design with more usable rows than
/// columns (64 MiB; beyond that the dual is refused on such designs).
const TALL_LIMIT: u128 = 64 << 20;

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
    watch: &Watch<'_>,
) -> Result<Solution> {
    let nu = problem.usable_rows();
    let p = problem.columns();
    // The row system has n_u^2 entries: on a tall design it dwarfs both the
    // design and the primal methods' p x p system.
    let bytes = 8 * (nu as u128) * (nu as u128);
    if nu > p && bytes > (8 * nu as u128 * p as u128).max(TALL_LIMIT) {
        return Err(Error::TooLarge {
            what: "dual row system of a design with more usable rows than columns (use another ridge method)",
            bytes,
        });
    }
    let rows: Vec<usize> = (0..problem.rows())
        .filter(|&i| problem.scaled_weight(i) > 0.0)
        .collect();
    let norms = match standardize {
        true => Some(dual::column_sq_norms(problem, scaling, watch)?),
        false => None,
    };
    let map = PenaltyMap::new(problem, scaling, norms.as_deref());
    let mu = map.scaled(lambda);
    let dual::RowGram { mut gram, target } =
        dual::row_gram(problem, scaling, &map.factors, &rows, watch)?;
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
    let gamma = dual::transpose_times(problem, scaling, &map.factors, &rows, &alpha, Some(watch));
    watch.check()?;
    Ok(Solution {
        beta: map.to_caller(scaling, &gamma),
        design_condition: None,
        system_condition: triangular::condition_lower(l.as_ref()),
        method: "dual",
    })
}

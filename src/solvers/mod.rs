//! The closed-form least-squares solvers.

mod cholesky;
mod qr;
mod refine;
pub(crate) mod svd;

pub use cholesky::Cholesky;
pub use qr::Qr;
pub use refine::Refinement;
pub use svd::Svd;

use crate::prep::Scaling;
use crate::problem::Problem;

/// Columns of the design that are numerically dependent on earlier ones,
/// from a factor `r` with `r^T r = Z^T Z` (`p x p`): a column is dependent
/// when its distance to the span of the earlier independent columns is at
/// most `tolerance` times an upper bound of the raw column's weighted norm,
/// or when it is numerically constant beside the intercept.
pub(crate) fn dependent_columns(
    problem: &Problem<'_>,
    scaling: &Scaling,
    r: faer::MatRef<'_, f64>,
    tolerance: f64,
) -> Vec<usize> {
    let p = r.ncols();
    let threshold = |j: usize| {
        if scaling.constant[j] {
            f64::INFINITY
        } else {
            tolerance * scaling.raw_norm_bound(problem, j)
        }
    };
    // Fast path: the diagonal of a triangle bounds each column's distance to
    // the span of *all* earlier columns from below, so if every pivot is
    // large no column is dependent.
    let triangular = (0..p).all(|j| (0..j).all(|i| r[(j, i)] == 0.0));
    if triangular && (0..p).all(|j| r[(j, j)].abs() > threshold(j)) {
        return Vec::new();
    }
    crate::linalg::householder::dependent_columns(r, threshold)
}

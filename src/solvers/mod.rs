//! The closed-form least-squares solvers.

mod cholesky;
mod qr;
mod refine;
mod svd;

pub use cholesky::Cholesky;
pub use qr::Qr;
pub use refine::Refinement;
pub use svd::Svd;

use crate::prep::Scaling;
use crate::problem::Problem;

/// Columns whose pivot `|d_j|` is at most `tolerance` times the raw column
/// norm bound (or that are numerically constant beside the intercept).
pub(crate) fn small_pivots(
    problem: &Problem<'_>,
    scaling: &Scaling,
    pivots: impl Iterator<Item = f64>,
    tolerance: f64,
) -> Vec<usize> {
    pivots
        .enumerate()
        .filter(|&(j, d)| {
            scaling.constant[j] || d.abs() <= tolerance * scaling.raw_norm_bound(problem, j)
        })
        .map(|(j, _)| j)
        .collect()
}

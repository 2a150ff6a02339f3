//! Householder QR of the tall centered design by row blocks (TSQR).
//!
//! Each group of consecutive row blocks is reduced to a `k x k` triangle by
//! Householder QR of `[R; next block]`; the groups' triangles are then
//! stacked and factored once more. `Q` is never formed. This is as stable
//! as one Householder QR of the whole matrix, and needs one block of extra
//! memory per group instead of a copy of the design.

use faer::{Mat, MatMut};
use rayon::prelude::*;

use super::{block_groups, block_rows, GROUPS};
use crate::prep::{fill_block, Scaling};
use crate::problem::Problem;

/// Factors `a` in place and leaves a `k x k` factor `R` with
/// `R^T R = a^T a` in its top rows (everything else zeroed); see
/// [`super::householder::reduce_to_square`] for rank-deficient blocks.
fn qr_keep_r(a: MatMut<'_, f64>) -> bool {
    super::householder::reduce_to_square(a)
}

/// Returns the upper-triangular `k x k` factor `R` with `Z = Q R`, where `Z`
/// is the centered, weighted, scaled design (plus the target as a last
/// column when `with_target`: then `R[..p, p]` is `Q^T y` and `|R[p, p]|`
/// the residual norm of the scaled problem).
pub(crate) fn tall_skinny_r(
    problem: &Problem<'_>,
    scaling: &Scaling,
    with_target: bool,
) -> Mat<f64> {
    let k = problem.cols() + usize::from(with_target);
    let b = block_rows(k);
    let groups = block_groups(problem.rows(), b, GROUPS);
    let partials: Vec<(Mat<f64>, bool)> = groups
        .par_iter()
        .map(|group| {
            // Top k rows: the running factor; below: the next block.
            let mut buf = Mat::<f64>::zeros(k + b, k);
            let mut triangular = true;
            for &(r0, r1) in group {
                let len = r1 - r0;
                fill_block(
                    problem,
                    scaling,
                    r0,
                    r1,
                    with_target,
                    buf.as_mut().subrows_mut(k, len),
                );
                triangular = qr_keep_r(buf.as_mut().subrows_mut(0, k + len));
            }
            (buf.as_ref().subrows(0, k).to_owned(), triangular)
        })
        .collect();
    let (r, triangular) = if partials.len() == 1 {
        partials
            .into_iter()
            .next()
            .unwrap_or_else(|| (Mat::zeros(k, k), true))
    } else {
        let mut stacked = Mat::<f64>::zeros(k * partials.len(), k);
        for (g, (part, _)) in partials.iter().enumerate() {
            stacked
                .as_mut()
                .subrows_mut(g * k, k)
                .copy_from(part.as_ref());
        }
        let triangular = qr_keep_r(stacked.as_mut());
        (stacked.as_ref().subrows(0, k).to_owned(), triangular)
    };
    if triangular {
        r
    } else {
        super::householder::triangle_of(r.as_ref())
    }
}

/// Thin `Q` of a small dense matrix (see [`super::householder::thin_q`]).
pub(crate) fn thin_q(a: faer::MatRef<'_, f64>) -> Mat<f64> {
    super::householder::thin_q(a)
}

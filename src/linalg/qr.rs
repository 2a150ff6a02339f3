//! Householder QR of the tall centered design by row blocks (TSQR).
//!
//! Each group of consecutive row blocks is reduced to a `k x k` triangle by
//! Householder QR of `[R; next block]`; the groups' triangles are then
//! stacked and factored once more. `Q` is never formed. This is as stable
//! as one Householder QR of the whole matrix, and needs one block of extra
//! memory per group instead of a copy of the design.

use faer::reborrow::ReborrowMut;
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
    let last = if with_target {
        LastColumn::Target
    } else {
        LastColumn::None
    };
    factor_r(problem, scaling, last)
}

/// As [`tall_skinny_r`], with the last column `sqrt(w_i) v_i * inv_scale`
/// built from a caller-supplied vector `v` (one entry per row) instead of
/// the target: `R[..p, p]` is then `Q^T (W^(1/2) v) * inv_scale` for the
/// same `Q` as the design's (the design columns are factored exactly as
/// with the target, whatever the last column holds). Iterative refinement
/// uses it to apply `Q^T` to a residual without storing `Q`.
pub(crate) fn tall_skinny_r_with(
    problem: &Problem<'_>,
    scaling: &Scaling,
    v: &[f64],
    inv_scale: f64,
) -> Mat<f64> {
    factor_r(problem, scaling, LastColumn::Vector(v, inv_scale))
}

/// What the column after the design holds.
#[derive(Clone, Copy)]
enum LastColumn<'v> {
    None,
    Target,
    Vector(&'v [f64], f64),
}

fn factor_r(problem: &Problem<'_>, scaling: &Scaling, last: LastColumn<'_>) -> Mat<f64> {
    let with_last = !matches!(last, LastColumn::None);
    let p = problem.cols();
    let k = p + usize::from(with_last);
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
                let mut block = buf.as_mut().subrows_mut(k, len);
                match last {
                    LastColumn::None | LastColumn::Target => {
                        fill_block(problem, scaling, r0, r1, with_last, block.rb_mut())
                    }
                    LastColumn::Vector(v, inv_scale) => {
                        fill_block(
                            problem,
                            scaling,
                            r0,
                            r1,
                            false,
                            block.rb_mut().subcols_mut(0, p),
                        );
                        for (local, i) in (r0..r1).enumerate() {
                            block[(local, p)] =
                                problem.scaled_weight(i).sqrt() * (v[i] * inv_scale);
                        }
                    }
                }
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

//! The TSQR pass over a problem's rows: each group of row blocks folds its
//! transformed rows into a running triangle with the structured Householder
//! QR of [`crate::linalg::qr`], and the groups' triangles are folded in a
//! fixed tree (the same for any thread count).

use faer::{Mat, MatMut};

use crate::error::Result;
use crate::linalg::qr::{
    qr_block_rows, row_major_mut, row_stride, stacked_qr, stacked_qr_by_columns, StackedQrWork,
    QR_GROUPS,
};
use crate::linalg::{accumulator_groups, block_groups, tree_reduce};
use crate::observe::Watch;
use crate::prep::{fill_tail, Scaling, Tail};
use crate::problem::Problem;

/// Returns the upper-triangular `k x k` factor `R` with `Z = Q R`, where `Z`
/// is the centered, weighted, scaled design (plus the target as a last
/// column when `with_target`: then `R[..p, p]` is `Q^T y` and `|R[p, p]|`
/// the residual norm of the scaled problem). The signs of `R`'s rows are
/// arbitrary (a Householder convention).
///
/// Reports every block to `watch` (whose pass the caller has begun); a
/// stop skips the blocks not yet started and returns
/// [`crate::Error::Stopped`].
pub(crate) fn tall_skinny_r(
    problem: &Problem<'_>,
    scaling: &Scaling,
    with_target: bool,
    watch: &Watch<'_>,
) -> Result<Mat<f64>> {
    let tail = if with_target {
        Tail::Target
    } else {
        Tail::None
    };
    factor_r(problem, scaling, tail, watch)
}

/// As [`tall_skinny_r`], with the columns after the design given by `tail`
/// (see [`Tail`]): with [`Tail::Vector`] `R[..p, p]` is
/// `Q^T (W^(1/2) v) * inv_scale` for the same `Q` as the design's (the
/// design columns are factored exactly as with the target, whatever the
/// tail holds), which iterative refinement uses to apply `Q^T` to a
/// residual without storing `Q`; with [`Tail::Targets`] the trailing block
/// of `R` serves every target (a fit state's triangle).
pub(crate) fn tall_skinny_r_with(
    problem: &Problem<'_>,
    scaling: &Scaling,
    tail: Tail<'_>,
    watch: &Watch<'_>,
) -> Result<Mat<f64>> {
    factor_r(problem, scaling, tail, watch)
}

fn factor_r(
    problem: &Problem<'_>,
    scaling: &Scaling,
    tail: Tail<'_>,
    watch: &Watch<'_>,
) -> Result<Mat<f64>> {
    let k = problem.columns() + tail.width();
    let ld = row_stride(k);
    let b = qr_block_rows(k);
    // Folding two triangles costs about as much as factoring `k` rows, so
    // a group gets at least `64 k` rows (merges then cost under 2% of the
    // pass; a fit state's block of a few thousand rows gets one group),
    // except that up to 4 groups of at least `16 k` rows are allowed, so
    // that a wide design (100,000 x 1,000) still runs on several cores.
    let few = (problem.rows() / (16 * k.max(1))).min(4);
    let max_groups = accumulator_groups(problem.rows() / 8, k)
        .max(accumulator_groups(problem.rows(), k).min(few))
        .min(QR_GROUPS);
    let groups = block_groups(problem.rows(), b, max_groups);
    // A column-major design is read column by column into a column-major
    // block; any other layout row by row into a row-major block.
    let design = problem.design();
    let strides = design.strides();
    let by_columns = problem.columns() > 1 && strides[0] == 1 && strides[1] != 1;
    let leaf = |group: &[(usize, usize)]| {
        let mut r = Mat::<f64>::zeros(k, k);
        let mut buf = vec![0.0f64; b * ld.max(k)];
        let mut work = StackedQrWork::new(k);
        for &(r0, r1) in group {
            if !watch.go_on() {
                break;
            }
            let len = r1 - r0;
            if by_columns {
                let used = (k - 1) * b + len;
                let out =
                    MatMut::from_column_major_slice_with_stride_mut(&mut buf[..used], len, k, b);
                fill_tail(problem, scaling, r0, r1, tail, out);
                stacked_qr_by_columns(r.as_mut(), &mut buf, b, len, &mut work);
            } else {
                let out = row_major_mut(&mut buf, len, k, ld);
                fill_tail(problem, scaling, r0, r1, tail, out);
                stacked_qr(r.as_mut(), &mut buf, ld, len, &mut work);
            }
            watch.rows_done(len);
        }
        r
    };
    // Folding triangle `b` into `a`: the QR of `[a; b]`.
    let merge = |mut a: Mat<f64>, part: Mat<f64>| {
        crate::linalg::backend::merge_triangles(&mut a, part.as_ref());
        a
    };
    let r = tree_reduce(&groups, &leaf, &merge).unwrap_or_else(|| Mat::zeros(k, k));
    watch.check()?;
    Ok(r)
}

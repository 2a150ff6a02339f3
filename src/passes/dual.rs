//! Products for wide designs (more columns than rows), computed over blocks
//! of columns so that no `p x p` matrix is ever formed: the row Gram
//! `Ẑ Ẑ^T` of the usable rows, the product `Ẑ^T v`, and the squared column
//! norms of the centered, weighted, scaled design.
//!
//! Here `Ẑ_ij = sqrt(w_i) (x_ij - m_j) / s_j * f_j`: the design of
//! [`crate::prep::fill_block`] with every column multiplied by a caller
//! factor `f_j` (the ridge solvers use it to make the penalty uniform).

use faer::linalg::matmul::triangular::{matmul, BlockStructure};
use faer::{Accum, Mat, Par};
use rayon::prelude::*;

use crate::linalg::as_faer;
use crate::observe::{Stage, Watch};
use crate::prep::Scaling;
use crate::problem::Problem;

/// Bytes allowed for the per-group `n x n` accumulators of [`row_gram`].
const GRAM_BUDGET: usize = 1 << 28;
/// Most groups (accumulators) used by [`row_gram`].
const MAX_GRAM_GROUPS: usize = 4;

/// The row Gram matrix of the usable rows and the matching target.
pub(crate) struct RowGram {
    /// Full symmetric `n_u x n_u` matrix `Ẑ Ẑ^T` over the rows in `rows`.
    pub gram: Mat<f64>,
    /// `t_i = sqrt(w_i) (y_i - ybar) / s_y` for the same rows.
    pub target: Vec<f64>,
}

fn column_coefficients(scaling: &Scaling, factors: &[f64]) -> Vec<f64> {
    scaling
        .inv_scale
        .iter()
        .zip(factors)
        .map(|(a, f)| a * f)
        .collect()
}

/// Columns per block for a row Gram over `n` rows: a block of
/// [`crate::linalg::BLOCK_BYTES`] (see [`crate::linalg::block_rows`]: the block holds `n`
/// numbers per column).
fn column_block(n: usize) -> usize {
    crate::linalg::block_rows(n)
}

/// Computes `Ẑ Ẑ^T` over the rows listed in `rows` (row indices of the
/// problem, normally those with non-zero weight).
///
/// Columns are taken in blocks of about 8 MiB; each of a fixed number of
/// groups of consecutive blocks (at most 4, fewer when `n_u^2` is large,
/// depending only on the shape) accumulates its lower triangle with a
/// symmetric rank-k update, and the groups are summed in order, so the
/// result does not depend on the thread count. Extra memory: one `n_u x n_u`
/// matrix and one block per group; the design is never copied whole.
///
/// # Errors
/// [`crate::Error::TooLarge`] when the `n_u x n_u` matrices cannot be
/// allocated.
pub(crate) fn row_gram(
    problem: &Problem<'_>,
    scaling: &Scaling,
    factors: &[f64],
    rows: &[usize],
    watch: &Watch<'_>,
) -> crate::error::Result<RowGram> {
    watch.begin(Stage::Factor, problem.rows());
    let x = as_faer(&problem.design());
    let n = rows.len();
    let p = problem.columns();
    let coef = column_coefficients(scaling, factors);
    let means = &problem.stats.means;
    let sw: Vec<f64> = rows
        .iter()
        .map(|&i| problem.scaled_weight(i).sqrt())
        .collect();
    let cb = column_block(n);
    let blocks: Vec<(usize, usize)> = (0..p.div_ceil(cb))
        .map(|b| (b * cb, ((b + 1) * cb).min(p)))
        .collect();
    let per_acc = n.saturating_mul(n).saturating_mul(8).max(1);
    let groups = (GRAM_BUDGET / per_acc)
        .clamp(1, MAX_GRAM_GROUPS)
        .min(blocks.len().max(1));
    crate::alloc::reserve_matrices("row Gram matrix", n, n, groups + 1)?;
    crate::alloc::reserve_matrices("column block", cb, n, groups)?;
    let per = blocks.len().div_ceil(groups).max(1);
    let chunks: Vec<&[(usize, usize)]> = blocks.chunks(per).collect();
    let partials: Vec<Mat<f64>> = chunks
        .par_iter()
        .map(|chunk| {
            let mut acc = Mat::<f64>::zeros(n, n);
            let mut bt = Mat::<f64>::zeros(cb, n);
            for &(c0, c1) in chunk.iter() {
                if !watch.go_on() {
                    break;
                }
                let width = c1 - c0;
                for (li, &i) in rows.iter().enumerate() {
                    let s = sw[li];
                    for j in c0..c1 {
                        bt[(j - c0, li)] = s * ((x[(i, j)] - means[j]) * coef[j]);
                    }
                }
                let blk = bt.as_ref().subrows(0, width);
                matmul(
                    acc.as_mut(),
                    BlockStructure::TriangularLower,
                    Accum::Add,
                    blk.transpose(),
                    BlockStructure::Rectangular,
                    blk,
                    BlockStructure::Rectangular,
                    1.0,
                    Par::Seq,
                );
            }
            acc
        })
        .collect();
    // Every row is read by every column block: the rows are done together.
    watch.rows_done(problem.rows());
    watch.check()?;
    let mut gram = Mat::<f64>::zeros(n, n);
    for part in &partials {
        for j in 0..n {
            for i in j..n {
                gram[(i, j)] += part[(i, j)];
            }
        }
    }
    for j in 0..n {
        for i in (j + 1)..n {
            gram[(j, i)] = gram[(i, j)];
        }
    }
    let y = problem.target();
    let ym = problem.stats.target_mean;
    let inv_sy = 1.0 / scaling.target_scale;
    let target = rows
        .iter()
        .zip(&sw)
        .map(|(&i, s)| s * ((y[i] - ym) * inv_sy))
        .collect();
    Ok(RowGram { gram, target })
}

/// Computes `Ẑ^T v` (length `p`) for `v` indexed like `rows`.
///
/// Parallel over fixed chunks of columns; each column's sum runs over the
/// rows in order, so the result does not depend on the thread count.
/// With a `watch`, a pass of the [`Stage::Factor`] stage that reports its
/// rows once, when every column chunk is done (each reads every row); the
/// caller checks for a stop.
pub(crate) fn transpose_times(
    problem: &Problem<'_>,
    scaling: &Scaling,
    factors: &[f64],
    rows: &[usize],
    v: &[f64],
    watch: Option<&Watch<'_>>,
) -> Vec<f64> {
    if let Some(w) = watch {
        w.begin(Stage::Factor, problem.rows());
    }
    let x = as_faer(&problem.design());
    let p = problem.columns();
    let coef = column_coefficients(scaling, factors);
    let means = &problem.stats.means;
    let u: Vec<f64> = rows
        .iter()
        .zip(v)
        .map(|(&i, vi)| problem.scaled_weight(i).sqrt() * vi)
        .collect();
    // Columns per parallel chunk: the crate's one block size, a column of
    // the design holding one number per listed row.
    let per = crate::linalg::block_rows(rows.len());
    let chunks: Vec<usize> = (0..p.div_ceil(per)).collect();
    let parts: Vec<Vec<f64>> = chunks
        .par_iter()
        .map(|&c| {
            let c0 = c * per;
            let c1 = (c0 + per).min(p);
            let mut acc = vec![0.0; c1 - c0];
            if watch.is_some_and(|w| !w.go_on()) {
                return acc;
            }
            for (li, &i) in rows.iter().enumerate() {
                let ui = u[li];
                if ui == 0.0 {
                    continue;
                }
                for (a, j) in acc.iter_mut().zip(c0..c1) {
                    *a += (x[(i, j)] - means[j]) * ui;
                }
            }
            for (a, j) in acc.iter_mut().zip(c0..c1) {
                *a *= coef[j];
            }
            acc
        })
        .collect();
    if let Some(w) = watch {
        w.rows_done(problem.rows());
    }
    parts.into_iter().flatten().collect()
}

/// Squared norms `||Z_j||^2 = sum_i w_i ((x_ij - m_j) / s_j)^2` of the
/// columns of the centered, weighted, scaled design (0 for columns treated
/// as constant). One pass over the design, in parallel over a fixed
/// partition of the rows; partial sums are combined in order. Reported to
/// `watch` as a [`Stage::Factor`] pass.
pub(crate) fn column_sq_norms(
    problem: &Problem<'_>,
    scaling: &Scaling,
    watch: &Watch<'_>,
) -> crate::error::Result<Vec<f64>> {
    watch.begin(Stage::Factor, problem.rows());
    // The gradient solvers need the same sums: one implementation serves both.
    let norms = super::gradient::column_norms(problem, &scaling.inv_scale, Some(watch));
    watch.check()?;
    Ok(norms)
}

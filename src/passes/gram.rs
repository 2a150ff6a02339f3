//! The centered Gram matrix `Z^T Z` over row blocks, in parallel.

use faer::reborrow::{IntoConst, ReborrowMut};
use faer::Mat;

use crate::error::Result;
use crate::linalg::gram::lower_gram_add;
use crate::linalg::{accumulator_groups, block_groups, block_rows, tree_reduce};
use crate::observe::Watch;
use crate::prep::{fill_tail, Scaling, Tail};
use crate::problem::Problem;

/// Returns the full symmetric `k x k` matrix `Z^T Z`, where `Z` is the
/// centered, weighted, scaled design (with the target as a last column when
/// `with_target`, so that `Z^T y` and `y^T y` come with it).
///
/// Each group of row blocks accumulates its own lower triangle with a
/// symmetric rank-k update (by panels, see [`crate::linalg::gram::lower_gram_add`]; faer's
/// sequential kernel); groups run in parallel and are summed in a fixed
/// binary tree, so the result does not depend on the thread count. A block is
/// filled in the layout the design can be read in contiguously (transposed,
/// `k x rows`, for a row-major design) and sized to stay in the core's
/// second-level cache. Extra memory: one block and one `k x k` matrix per
/// thread and level of the tree (about `threads * (1 + log2 64)` matrices).
///
/// Reports every block to `watch` (whose pass the caller has begun); a
/// stop skips the blocks not yet started and returns
/// [`crate::Error::Stopped`].
pub(crate) fn centered_gram(
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
    centered_gram_with(problem, scaling, tail, watch)
}

/// As [`centered_gram`], with the columns after the design given by `tail`
/// (several targets for a cross-product state).
pub(crate) fn centered_gram_with(
    problem: &Problem<'_>,
    scaling: &Scaling,
    tail: Tail<'_>,
    watch: &Watch<'_>,
) -> Result<Mat<f64>> {
    let k = problem.columns() + tail.width();
    let b = block_rows(k);
    let groups = block_groups(problem.rows(), b, accumulator_groups(problem.rows(), k));
    // A column-major design is read column by column into a `rows x k`
    // block; any other layout row by row into a `k x rows` block.
    let design = problem.design();
    let strides = design.strides();
    let by_columns = strides[0] == 1 && strides[1] != 1;
    let leaf = |group: &[(usize, usize)]| {
        let mut acc = Mat::<f64>::zeros(k, k);
        let mut block = if by_columns {
            Mat::<f64>::zeros(b, k)
        } else {
            Mat::<f64>::zeros(k, b)
        };
        for &(r0, r1) in group {
            if !watch.go_on() {
                break;
            }
            let len = r1 - r0;
            // `z` is the `len x k` block of Z, whatever its storage.
            let z = if by_columns {
                let mut z = block.as_mut().subrows_mut(0, len);
                fill_tail(problem, scaling, r0, r1, tail, z.rb_mut());
                z.into_const()
            } else {
                let mut zt = block.as_mut().subcols_mut(0, len);
                fill_tail(problem, scaling, r0, r1, tail, zt.rb_mut().transpose_mut());
                zt.into_const().transpose()
            };
            lower_gram_add(acc.as_mut(), z);
            watch.rows_done(len);
        }
        acc
    };
    // The panels also fill part of the upper triangle: sum the lower only.
    let merge = |mut a: Mat<f64>, b: Mat<f64>| {
        for j in 0..k {
            for i in j..k {
                a[(i, j)] += b[(i, j)];
            }
        }
        a
    };
    let mut g = tree_reduce(&groups, &leaf, &merge).unwrap_or_else(|| Mat::zeros(k, k));
    watch.check()?;
    for j in 0..k {
        for i in (j + 1)..k {
            g[(j, i)] = g[(i, j)];
        }
    }
    Ok(g)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::prep::fill_block;
    use ndarray::{Array1, Array2};

    /// The panelled Gram over blocks equals `Z^T Z` summed straight from
    /// the filled rows (the same numbers in another order: equal to
    /// rounding), for shapes around the panel and block sizes.
    #[test]
    fn gram_matches_direct_sum() {
        for &(n, p) in &[(5usize, 2usize), (700, 33), (3000, 65), (1200, 31)] {
            let x = Array2::from_shape_fn((n, p), |(i, j)| {
                (((i * 7919 + j * 104_729) % 1009) as f64 / 1009.0 - 0.5) + j as f64
            });
            let y = Array1::from_shape_fn(n, |i| (i % 13) as f64);
            let problem = Problem::new(x.view(), y.view()).expect("valid");
            let scaling = Scaling::new(&problem, 1e-12);
            let g = centered_gram(&problem, &scaling, true, &Watch::quiet()).expect("unstopped");
            let mut z = Mat::<f64>::zeros(n, p + 1);
            fill_block(&problem, &scaling, 0, n, true, z.as_mut());
            for i in 0..=p {
                for j in 0..=p {
                    let direct: f64 = (0..n).map(|r| z[(r, i)] * z[(r, j)]).sum();
                    let tol = 1e-12 * n as f64;
                    assert!((g[(i, j)] - direct).abs() <= tol, "{n}x{p} ({i},{j})");
                }
            }
        }
    }
}

//! The centered Gram matrix `Z^T Z` over row blocks, in parallel.

use faer::linalg::matmul::triangular::{matmul, BlockStructure};
use faer::{Accum, Mat, Par};
use rayon::prelude::*;

use super::{block_groups, block_rows, GROUPS};
use crate::prep::{fill_block, Scaling};
use crate::problem::Problem;

/// Returns the full symmetric `k x k` matrix `Z^T Z`, where `Z` is the
/// centered, weighted, scaled design (with the target as a last column when
/// `with_target`, so that `Z^T y` and `y^T y` come with it).
///
/// Each group of row blocks accumulates its own lower triangle with a
/// symmetric rank-k update (half the flops of a general product); groups
/// are summed in a fixed order, so the result does not depend on the
/// thread count. Extra memory: one block and one `k x k` matrix per group.
pub(crate) fn centered_gram(
    problem: &Problem<'_>,
    scaling: &Scaling,
    with_target: bool,
) -> Mat<f64> {
    let k = problem.cols() + usize::from(with_target);
    let b = block_rows(k);
    let groups = block_groups(problem.rows(), b, GROUPS);
    let partials: Vec<Mat<f64>> = groups
        .par_iter()
        .map(|group| {
            let mut acc = Mat::<f64>::zeros(k, k);
            let mut block = Mat::<f64>::zeros(b, k);
            for &(r0, r1) in group {
                let len = r1 - r0;
                fill_block(
                    problem,
                    scaling,
                    r0,
                    r1,
                    with_target,
                    block.as_mut().subrows_mut(0, len),
                );
                let blk = block.as_ref().subrows(0, len);
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
    let mut g = Mat::<f64>::zeros(k, k);
    for part in &partials {
        for j in 0..k {
            for i in j..k {
                g[(i, j)] += part[(i, j)];
            }
        }
    }
    for j in 0..k {
        for i in (j + 1)..k {
            g[(j, i)] = g[(i, j)];
        }
    }
    g
}

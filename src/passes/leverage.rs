//! One pass over the rows for inference: leverages, weighted residuals and
//! the middle matrix of a sandwich covariance, without ever forming the
//! `n x n` hat matrix.
//!
//! With `Z = Q R` the centered, weighted, scaled design (see
//! [`crate::prep::fill_block`]) the rows of `Q` are `q_i = R^-T z_i`, and a
//! block of them is `Z_blk R^-1` (one triangular solve per block, `Q` is
//! never stored). When the model has an intercept, the weighted ones column
//! `u_i = sqrt(w_i)` is orthogonal to the centered columns, so its
//! orthonormal coordinate `u_i / sqrt(W)` is appended as a last entry. The
//! leverage of row `i` is the squared length of this extended row.

use faer::linalg::matmul::triangular::{matmul, BlockStructure};
use faer::linalg::triangular_solve::solve_lower_triangular_in_place;
use faer::{Accum, Mat, MatRef, Par};
use ndarray::Axis;

use crate::error::Result;
use crate::linalg::{accumulator_groups, block_groups, block_rows, tree_reduce, GROUPS};
use crate::prep::{fill_block, Scaling};
use crate::problem::Problem;

/// What a [`row_pass`] computes besides the largest leverage.
#[derive(Debug, Clone, Copy)]
pub(crate) struct RowPassSpec<'a> {
    /// Upper-triangular `p x p` factor `R` of the scaled centered design.
    pub r: MatRef<'a, f64>,
    /// Slopes in scaled coordinates (`gamma_j = b_j s_j / s_y`).
    pub gamma: &'a [f64],
    /// `Some(W)` (sum of the scaled weights) when the model has an intercept.
    pub intercept_weight: Option<f64>,
    /// `Some(k)`: accumulate the middle matrix
    /// `sum_i (e_i / c)^2 (1 - h_i)^-k q_i q_i^T` (extended rows `q_i`,
    /// scaled weighted residuals `e_i`, `c` = `residual_scale`). Rows with
    /// `1 - h_i <= leverage_one` add nothing when `k > 0`.
    pub meat_power: Option<i32>,
    /// A power of two near the largest residual, dividing them before the
    /// middle matrix is formed (so that it does not underflow).
    pub residual_scale: f64,
    /// Keep the per-row leverages and residuals.
    pub keep_rows: bool,
    /// Threshold below which `1 - h_i` counts as zero.
    pub leverage_one: f64,
}

/// Results of a [`row_pass`].
#[derive(Debug, Clone)]
pub(crate) struct RowPass {
    /// Leverage of every row (0 for rows of weight zero); empty unless kept.
    pub leverage: Vec<f64>,
    /// Weighted residuals in scaled units, `sqrt(w_i / w_scale) e_i / s_y`;
    /// empty unless kept.
    pub scaled_residuals: Vec<f64>,
    /// Residuals `y_i - y_hat_i` (unweighted) in units of the target scale
    /// `s_y`, formed from centered, scaled values; empty unless kept.
    pub residuals: Vec<f64>,
    /// The middle matrix (`q x q`, `q = p + intercept`) when asked for.
    pub meat: Option<Mat<f64>>,
    /// Row and value of the largest leverage (`None` when there are no rows).
    pub max_leverage: Option<(usize, f64)>,
}

struct GroupResult {
    leverage: Vec<f64>,
    scaled_residuals: Vec<f64>,
    residuals: Vec<f64>,
    meat: Option<Mat<f64>>,
    max_leverage: Option<(usize, f64)>,
}

/// Runs the pass: one read of the design, in parallel over a fixed
/// partition of the rows (results do not depend on the thread count), the
/// groups' results folded in a fixed tree ([`tree_reduce`]).
///
/// Extra memory: one block of rows ([`crate::linalg::BLOCK_BYTES`]) per running
/// group; with a middle matrix, one `q x q` accumulator per group alive
/// (at most one group per `8 q` rows, see [`accumulator_groups`]); the
/// per-row vectors when kept.
///
/// # Errors
/// [`crate::Error::TooLarge`] when the per-row vectors or the accumulators cannot
/// be allocated.
pub(crate) fn row_pass(
    problem: &Problem<'_>,
    scaling: &Scaling,
    spec: RowPassSpec<'_>,
) -> Result<RowPass> {
    let p = problem.columns();
    let n = problem.rows();
    let intercept = spec.intercept_weight.is_some();
    let q = p + usize::from(intercept);
    let k = p + 1;
    let b = block_rows(k);
    let max_groups = if spec.meat_power.is_some() {
        accumulator_groups(n, q)
    } else {
        GROUPS
    };
    let groups = block_groups(n, b, max_groups);
    crate::alloc::reserve_matrices("row block", b, k, 1)?;
    if spec.meat_power.is_some() {
        crate::alloc::reserve_matrices("sandwich middle matrix", q, q, 2)?;
    }
    if spec.keep_rows {
        crate::alloc::reserve_matrices("per-row diagnostics", n, 3, 2)?;
    }
    let inv_sqrt_w = spec.intercept_weight.map_or(0.0, |w| 1.0 / w.sqrt());
    let x = problem.design();
    let y = problem.target();
    let means = problem.column_means();
    let ym = problem.target_mean();
    let inv_sy = 1.0 / scaling.target_scale;
    let leaf = |group: &[(usize, usize)]| {
        let mut block = Mat::<f64>::zeros(b, k);
        let mut res = vec![0.0; b];
        let rows_here: usize = group.iter().map(|&(r0, r1)| r1 - r0).sum();
        let cap = if spec.keep_rows { rows_here } else { 0 };
        let mut out = GroupResult {
            leverage: Vec::with_capacity(cap),
            scaled_residuals: Vec::with_capacity(cap),
            residuals: Vec::with_capacity(cap),
            meat: spec.meat_power.map(|_| Mat::<f64>::zeros(q, q)),
            max_leverage: None,
        };
        for &(r0, r1) in group {
            let len = r1 - r0;
            fill_block(
                problem,
                scaling,
                r0,
                r1,
                true,
                block.as_mut().subrows_mut(0, len),
            );
            for (l, e) in res.iter_mut().enumerate().take(len) {
                let mut fit = 0.0;
                for (j, g) in spec.gamma.iter().enumerate() {
                    fit += block[(l, j)] * g;
                }
                *e = block[(l, p)] - fit;
            }
            if p > 0 {
                // Q_blk = Z_blk R^-1, i.e. R^T Q_blk^T = Z_blk^T.
                solve_lower_triangular_in_place(
                    spec.r.transpose(),
                    block.as_mut().submatrix_mut(0, 0, len, p).transpose_mut(),
                    Par::Seq,
                );
            }
            for (l, i) in (r0..r1).enumerate() {
                block[(l, p)] = if intercept {
                    problem.scaled_weight(i).sqrt() * inv_sqrt_w
                } else {
                    0.0
                };
                let h: f64 = (0..q).map(|j| block[(l, j)] * block[(l, j)]).sum();
                if out.max_leverage.is_none_or(|(_, m)| h > m) {
                    out.max_leverage = Some((i, h));
                }
                if spec.keep_rows {
                    out.leverage.push(h);
                    out.scaled_residuals.push(res[l]);
                    let row = x.index_axis(Axis(0), i);
                    let mut fit = 0.0;
                    for (j, &v) in row.iter().enumerate() {
                        fit += ((v - means[j]) * scaling.inv_scale[j]) * spec.gamma[j];
                    }
                    out.residuals.push((y[i] - ym) * inv_sy - fit);
                }
                if let Some(power) = spec.meat_power {
                    let gap = 1.0 - h;
                    let e = res[l] / spec.residual_scale;
                    let c = if power == 0 {
                        e
                    } else if gap <= spec.leverage_one {
                        0.0
                    } else {
                        e / gap.powi(power).sqrt()
                    };
                    for j in 0..q {
                        block[(l, j)] *= c;
                    }
                }
            }
            if let Some(meat) = out.meat.as_mut() {
                let blk = block.as_ref().submatrix(0, 0, len, q);
                matmul(
                    meat.as_mut(),
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
        }
        out
    };
    let merge = |mut a: GroupResult, part: GroupResult| {
        a.leverage.extend(part.leverage);
        a.scaled_residuals.extend(part.scaled_residuals);
        a.residuals.extend(part.residuals);
        if let (Some(acc), Some(m)) = (a.meat.as_mut(), part.meat.as_ref()) {
            for j in 0..q {
                for i in j..q {
                    acc[(i, j)] += m[(i, j)];
                }
            }
        }
        if let Some((row, h)) = part.max_leverage {
            if a.max_leverage.is_none_or(|(_, m)| h > m) {
                a.max_leverage = Some((row, h));
            }
        }
        a
    };
    let total = tree_reduce(&groups, &leaf, &merge);
    let mut pass = match total {
        Some(t) => RowPass {
            leverage: t.leverage,
            scaled_residuals: t.scaled_residuals,
            residuals: t.residuals,
            meat: t.meat,
            max_leverage: t.max_leverage,
        },
        None => RowPass {
            leverage: Vec::new(),
            scaled_residuals: Vec::new(),
            residuals: Vec::new(),
            meat: spec.meat_power.map(|_| Mat::<f64>::zeros(q, q)),
            max_leverage: None,
        },
    };
    if let Some(acc) = pass.meat.as_mut() {
        for j in 0..q {
            for i in (j + 1)..q {
                acc[(j, i)] = acc[(i, j)];
            }
        }
    }
    Ok(pass)
}

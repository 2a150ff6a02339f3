//! Fused residual-and-gradient passes for the gradient solvers.
//!
//! One pass reads the raw design once and, for a coefficient vector `c`
//! (already divided by the column scales), forms for every row
//!
//! ```text
//! r_i = t_i - sum_j (x_ij - m_j) c_j        (t_i = (y_i - ybar) / s_y, or 0)
//! ```
//!
//! and accumulates `acc_j = sum_i w_i r_i (x_ij - m_j)` and
//! `sq = sum_i w_i r_i^2` (`w_i` the internally scaled weights, `m_j` the
//! weighted column means). The centering is applied on the fly to each
//! value as it is read, so columns with large offsets cost no digits, and
//! no transformed copy of the design (not even one block of it, for
//! row-major designs) is ever formed.
//!
//! Row-major designs are processed row by row (a dot product and an update
//! of `acc` from the same row, which is still in the L1 cache); column-major
//! designs block by block (a column sweep to form the block's residuals, a
//! second sweep over the same block, now in cache, for `acc`); any other
//! layout element by element. Rows are split into a fixed partition of
//! groups (it depends on the shape only, never on the thread count); groups
//! run in parallel and their partial sums are added in group order, so a
//! pass gives the same bits on any number of threads.
//!
//! The hot loops keep eight independent partial sums in a fixed order, so
//! the compiler vectorises them without changing the result; on x86-64 the
//! same source is also compiled for AVX2 and chosen at run time, giving
//! identical bits on both paths (no fused multiply-add is used).

use ndarray::{s, ArrayView2, Axis};
use rayon::prelude::*;

use super::{block_groups, GROUPS};
use crate::problem::Problem;

/// Sums from one residual pass (see the module docs).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Pass {
    /// `acc_j = sum_i w_i r_i (x_ij - m_j)`.
    pub acc: Vec<f64>,
    /// `sum_i w_i r_i^2`.
    pub sq: f64,
}

/// Rows handled together by one sequential unit of a mini-batch pass.
const ROW_CHUNK: usize = 1024;

/// Rows per block of a column-major pass: about 256 KiB of design per block.
fn block_len(p: usize) -> usize {
    ((1usize << 15) / p.max(1)).clamp(64, 4096)
}

/// What a pass needs besides the design.
#[derive(Clone, Copy)]
struct Inputs<'b, 'a> {
    x: ArrayView2<'a, f64>,
    means: &'b [f64],
    coef: &'b [f64],
    problem: &'b Problem<'a>,
    ym: f64,
    inv_sy: f64,
}

impl Inputs<'_, '_> {
    #[inline(always)]
    fn target(&self, i: usize) -> f64 {
        if self.inv_sy == 0.0 {
            0.0
        } else {
            (self.problem.target()[i] - self.ym) * self.inv_sy
        }
    }
}

/// Full residual pass over every row (see the module docs). `coef` has one
/// entry per column; `inv_sy` is `1 / s_y`, or 0 to leave the target out
/// (then the pass computes `acc = -Z^T Z c` in the transformed coordinates).
pub(crate) fn residual_pass(problem: &Problem<'_>, coef: &[f64], inv_sy: f64) -> Pass {
    let x = problem.design();
    let (n, p) = x.dim();
    let inputs = Inputs {
        x,
        means: &problem.stats.means,
        coef,
        problem,
        ym: problem.stats.target_mean,
        inv_sy,
    };
    let column_major = p > 1 && x.strides()[0] == 1;
    let groups = block_groups(n, block_len(p), GROUPS);
    let partials: Vec<Pass> = groups
        .par_iter()
        .map(|group| {
            let mut out = Pass {
                acc: vec![0.0; p],
                sq: 0.0,
            };
            for &(r0, r1) in group {
                if column_major {
                    dispatch_block_cols(&inputs, r0, r1, &mut out);
                } else if !dispatch_contiguous(&inputs, r0, r1, &mut out) {
                    dispatch_rows(&inputs, r0..r1, &mut out);
                }
            }
            out
        })
        .collect();
    combine(partials, p)
}

/// Residual pass over the listed rows only (a mini-batch), in the order
/// given. The rows are cut into fixed chunks of [`ROW_CHUNK`], processed in
/// parallel when there are several, and added in chunk order: the result
/// depends on the row list only.
pub(crate) fn residual_rows(
    problem: &Problem<'_>,
    coef: &[f64],
    inv_sy: f64,
    rows: &[usize],
) -> Pass {
    let p = problem.cols();
    let inputs = Inputs {
        x: problem.design(),
        means: &problem.stats.means,
        coef,
        problem,
        ym: problem.stats.target_mean,
        inv_sy,
    };
    let run = |chunk: &[usize]| {
        let mut out = Pass {
            acc: vec![0.0; p],
            sq: 0.0,
        };
        dispatch_rows(&inputs, chunk.iter().copied(), &mut out);
        out
    };
    if rows.len() <= ROW_CHUNK {
        return run(rows);
    }
    let partials: Vec<Pass> = rows.par_chunks(ROW_CHUNK).map(run).collect();
    combine(partials, p)
}

/// `max_i w_i sum_j ((x_ij - m_j) inv_scale_j)^2`: the largest squared norm
/// of a row of the transformed design (zero-weight rows excluded).
pub(crate) fn max_row_norm(problem: &Problem<'_>, inv_scale: &[f64]) -> f64 {
    let x = problem.design();
    let (n, p) = x.dim();
    let means = &problem.stats.means;
    let groups = block_groups(n, block_len(p), GROUPS);
    groups
        .par_iter()
        .map(|group| {
            let mut best = 0.0_f64;
            for &(r0, r1) in group {
                for i in r0..r1 {
                    let w = problem.scaled_weight(i);
                    if w == 0.0 {
                        continue;
                    }
                    let mut s = 0.0;
                    for ((&v, &m), &k) in x.row(i).iter().zip(means).zip(inv_scale) {
                        let z = (v - m) * k;
                        s += z * z;
                    }
                    best = best.max(w * s);
                }
            }
            best
        })
        .reduce(|| 0.0, f64::max)
}

/// `sum_i w_i ((x_ij - m_j) inv_scale_j)^2` for every column: the squared
/// norms of the transformed columns (one pass, fixed partition, partial
/// sums added in group order).
pub(crate) fn column_norms(problem: &Problem<'_>, inv_scale: &[f64]) -> Vec<f64> {
    let x = problem.design();
    let (n, p) = x.dim();
    let means = &problem.stats.means;
    let groups = block_groups(n, block_len(p), GROUPS);
    let partials: Vec<Vec<f64>> = groups
        .par_iter()
        .map(|group| {
            let mut acc = vec![0.0; p];
            for &(r0, r1) in group {
                for i in r0..r1 {
                    let w = problem.scaled_weight(i);
                    if w == 0.0 {
                        continue;
                    }
                    for (((a, &v), &m), &k) in acc
                        .iter_mut()
                        .zip(x.row(i).iter())
                        .zip(means)
                        .zip(inv_scale)
                    {
                        let z = (v - m) * k;
                        *a += w * z * z;
                    }
                }
            }
            acc
        })
        .collect();
    let mut total = vec![0.0; p];
    for part in partials {
        for (t, a) in total.iter_mut().zip(&part) {
            *t += a;
        }
    }
    total
}

fn combine(partials: Vec<Pass>, p: usize) -> Pass {
    let mut total = Pass {
        acc: vec![0.0; p],
        sq: 0.0,
    };
    for part in partials {
        for (t, a) in total.acc.iter_mut().zip(&part.acc) {
            *t += a;
        }
        total.sq += part.sq;
    }
    total
}

/// `sum_j (x_j - m_j) c_j` with eight partial sums in a fixed order.
#[inline(always)]
fn centered_dot(x: &[f64], m: &[f64], c: &[f64]) -> f64 {
    let mut s = [0.0_f64; 8];
    let xc = x.chunks_exact(8);
    let mc = m.chunks_exact(8);
    let cc = c.chunks_exact(8);
    let mut tail = 0.0;
    for ((&xv, &mv), &cv) in xc
        .remainder()
        .iter()
        .zip(mc.remainder())
        .zip(cc.remainder())
    {
        tail += (xv - mv) * cv;
    }
    for ((xa, ma), ca) in xc.zip(mc).zip(cc) {
        for l in 0..8 {
            s[l] += (xa[l] - ma[l]) * ca[l];
        }
    }
    (((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]))) + tail
}

/// `sum_i (x_i - m) u_i` with eight partial sums in a fixed order.
#[inline(always)]
fn shifted_dot(x: &[f64], m: f64, u: &[f64]) -> f64 {
    let mut s = [0.0_f64; 8];
    let xc = x.chunks_exact(8);
    let uc = u.chunks_exact(8);
    let mut tail = 0.0;
    for (&xv, &uv) in xc.remainder().iter().zip(uc.remainder()) {
        tail += (xv - m) * uv;
    }
    for (xa, ua) in xc.zip(uc) {
        for l in 0..8 {
            s[l] += (xa[l] - m) * ua[l];
        }
    }
    (((s[0] + s[1]) + (s[2] + s[3])) + ((s[4] + s[5]) + (s[6] + s[7]))) + tail
}

/// One row: residual, then `acc += w r (x - m)`; returns `w r^2`.
#[inline(always)]
fn row_update(row: &[f64], means: &[f64], coef: &[f64], t: f64, w: f64, acc: &mut [f64]) -> f64 {
    let r = t - centered_dot(row, means, coef);
    let u = w * r;
    for ((a, &v), &m) in acc.iter_mut().zip(row).zip(means) {
        *a += u * (v - m);
    }
    u * r
}

#[inline(always)]
fn rows_impl(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    let Inputs { x, means, coef, .. } = *inputs;
    for i in rows {
        let w = inputs.problem.scaled_weight(i);
        if w == 0.0 {
            continue;
        }
        let t = inputs.target(i);
        let row = x.index_axis(Axis(0), i);
        if let Some(slice) = row.to_slice() {
            out.sq += row_update(slice, means, coef, t, w, &mut out.acc);
        } else {
            // Strided rows (column-major mini-batches, other layouts).
            let mut fit = 0.0;
            for ((&v, &m), &c) in row.iter().zip(means).zip(coef) {
                fit += (v - m) * c;
            }
            let r = t - fit;
            let u = w * r;
            for ((a, &v), &m) in out.acc.iter_mut().zip(row.iter()).zip(means) {
                *a += u * (v - m);
            }
            out.sq += u * r;
        }
    }
}

/// Rows `r0..r1` of a design stored row after row without gaps, with a
/// contiguous target (and weights): plain slices, no per-row indexing.
#[inline(always)]
fn contiguous_impl<const WEIGHTED: bool>(
    inputs: &Inputs<'_, '_>,
    data: &[f64],
    y: &[f64],
    w: &[f64],
    out: &mut Pass,
) {
    let p = inputs.means.len();
    let inv_ws = 1.0 / inputs.problem.stats.weight_scale;
    let (ym, inv_sy) = (inputs.ym, inputs.inv_sy);
    for (k, (row, &yi)) in data.chunks_exact(p).zip(y).enumerate() {
        let wi = if WEIGHTED { w[k] * inv_ws } else { 1.0 };
        if WEIGHTED && wi == 0.0 {
            continue;
        }
        let t = if inv_sy == 0.0 {
            0.0
        } else {
            (yi - ym) * inv_sy
        };
        out.sq += row_update(row, inputs.means, inputs.coef, t, wi, &mut out.acc);
    }
}

#[inline(always)]
fn contiguous_any(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) -> bool {
    let block = inputs.x.slice_move(s![r0..r1, ..]);
    let target = inputs.problem.target().slice_move(s![r0..r1]);
    let (Some(data), Some(y)) = (block.to_slice(), target.to_slice()) else {
        return false;
    };
    match inputs.problem.weights() {
        None => contiguous_impl::<false>(inputs, data, y, &[], out),
        Some(w) => match w.slice_move(s![r0..r1]).to_slice() {
            Some(w) => contiguous_impl::<true>(inputs, data, y, w, out),
            None => return false,
        },
    }
    true
}

#[inline(always)]
fn block_cols_impl(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    let Inputs { x, means, coef, .. } = *inputs;
    let len = r1 - r0;
    let mut r: Vec<f64> = (r0..r1).map(|i| inputs.target(i)).collect();
    let block = x.slice(s![r0..r1, ..]);
    for (j, col) in block.axis_iter(Axis(1)).enumerate() {
        let (m, c) = (means[j], coef[j]);
        match col.to_slice() {
            Some(col) => {
                for (ri, &v) in r.iter_mut().zip(col) {
                    *ri -= (v - m) * c;
                }
            }
            None => {
                for (ri, &v) in r.iter_mut().zip(col.iter()) {
                    *ri -= (v - m) * c;
                }
            }
        }
    }
    let mut u = vec![0.0; len];
    for (k, (uk, &rk)) in u.iter_mut().zip(&r).enumerate() {
        let w = inputs.problem.scaled_weight(r0 + k);
        *uk = w * rk;
        out.sq += *uk * rk;
    }
    for (j, col) in block.axis_iter(Axis(1)).enumerate() {
        let m = means[j];
        out.acc[j] += match col.to_slice() {
            Some(col) => shifted_dot(col, m, &u),
            None => col.iter().zip(&u).map(|(&v, &uk)| (v - m) * uk).sum(),
        };
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn rows_avx2(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    rows_impl(inputs, rows, out)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn block_cols_avx2(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    block_cols_impl(inputs, r0, r1, out)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn contiguous_avx2(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) -> bool {
    contiguous_any(inputs, r0, r1, out)
}

/// Runs the contiguous row-major path if the block qualifies; `false` if not
/// (nothing was done).
fn dispatch_contiguous(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) -> bool {
    if inputs.means.is_empty() {
        return false;
    }
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: as in `dispatch_rows`.
        return unsafe { contiguous_avx2(inputs, r0, r1, out) };
    }
    contiguous_any(inputs, r0, r1, out)
}

fn dispatch_rows(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: the CPU supports AVX2 (checked just above); the function
        // has no other requirement.
        unsafe { rows_avx2(inputs, rows, out) };
        return;
    }
    rows_impl(inputs, rows, out)
}

fn dispatch_block_cols(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    #[cfg(target_arch = "x86_64")]
    if std::arch::is_x86_feature_detected!("avx2") {
        // SAFETY: as in `dispatch_rows`.
        unsafe { block_cols_avx2(inputs, r0, r1, out) };
        return;
    }
    block_cols_impl(inputs, r0, r1, out)
}

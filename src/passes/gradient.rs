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
//! The hot loops are the run-time dispatched kernels of
//! [`crate::linalg::kernels`] (eight lanes in a fixed order, fused
//! multiply-adds, the same bits on every instruction set), and each path is
//! compiled once per instruction set through `kernels::dispatch`.

use ndarray::{s, ArrayView2, Axis};
use rayon::prelude::*;

use crate::linalg::{block_groups, kernels, GROUPS};
use crate::observe::Watch;
use crate::problem::Problem;

/// Sums from one residual pass (see the module docs).
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Pass {
    /// `acc_j = sum_i w_i r_i (x_ij - m_j)`.
    pub acc: Vec<f64>,
    /// `sum_i w_i r_i^2`.
    pub sq: f64,
}

/// Values ahead of the current row that the contiguous pass prefetches.
const PREFETCH_VALUES: usize = 256;

/// Columns from which the contiguous pass prefetches (rows of 256 bytes).
const PREFETCH_MIN_COLUMNS: usize = 32;

/// Rows per block of the partition (and of a column-major pass's residual
/// vectors): [`crate::linalg::block_rows`].
fn block_len(p: usize) -> usize {
    crate::linalg::block_rows(p)
}

/// What a pass needs besides the design.
#[derive(Clone, Copy)]
struct Inputs<'b, 'a> {
    x: ArrayView2<'a, f64>,
    means: &'b [f64],
    coef: &'b [f64],
    /// Per-column multipliers of `x - m` applied before `coef` (columns
    /// near the ends of the f64 range); `None`: the fast kernels.
    pre: Option<&'b [f64]>,
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
/// With `pre`, every `x_ij - m_j` is multiplied by `pre_j` first (and
/// `acc` holds the sums of the pre-multiplied values): a plain, exact and
/// slower path for columns near the ends of the f64 range.
pub(crate) fn residual_pass(
    problem: &Problem<'_>,
    coef: &[f64],
    pre: Option<&[f64]>,
    inv_sy: f64,
    watch: Option<&Watch<'_>>,
) -> Pass {
    let x = problem.design();
    let (n, p) = x.dim();
    let inputs = Inputs {
        x,
        means: &problem.stats.means,
        coef,
        pre,
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
                if watch.is_some_and(|w| !w.go_on()) {
                    break;
                }
                if inputs.pre.is_some() {
                    rows_prescaled(&inputs, r0..r1, &mut out);
                } else if column_major {
                    dispatch_block_cols(&inputs, r0, r1, &mut out);
                } else if !dispatch_contiguous(&inputs, r0, r1, &mut out) {
                    dispatch_rows(&inputs, r0..r1, &mut out);
                }
                if let Some(w) = watch {
                    w.rows_done(r1 - r0);
                }
            }
            out
        })
        .collect();
    combine(partials, p)
}

/// Residual pass over the listed rows only (a mini-batch), in the order
/// given. The rows are cut into fixed chunks of
/// [`crate::linalg::block_rows`] rows (for rows of `p + 1` numbers), processed in
/// parallel when there are several, and added in chunk order: the result
/// depends on the row list only.
pub(crate) fn residual_rows(
    problem: &Problem<'_>,
    coef: &[f64],
    pre: Option<&[f64]>,
    inv_sy: f64,
    rows: &[usize],
) -> Pass {
    let p = problem.columns();
    let inputs = Inputs {
        x: problem.design(),
        means: &problem.stats.means,
        coef,
        pre,
        problem,
        ym: problem.stats.target_mean,
        inv_sy,
    };
    let run = |chunk: &[usize]| {
        let mut out = Pass {
            acc: vec![0.0; p],
            sq: 0.0,
        };
        if inputs.pre.is_some() {
            rows_prescaled(&inputs, chunk.iter().copied(), &mut out);
        } else {
            dispatch_rows(&inputs, chunk.iter().copied(), &mut out);
        }
        out
    };
    let chunk = crate::linalg::block_rows(p + 1);
    if rows.len() <= chunk {
        return run(rows);
    }
    let partials: Vec<Pass> = rows.par_chunks(chunk).map(run).collect();
    combine(partials, p)
}

/// `max_i w_i sum_j ((x_ij - m_j) pre_j inv_scale_j)^2`: the largest squared
/// norm of a row of the transformed design (zero-weight rows excluded).
pub(crate) fn max_row_norm(
    problem: &Problem<'_>,
    inv_scale: &[f64],
    pre: Option<&[f64]>,
    watch: Option<&Watch<'_>>,
) -> f64 {
    let x = problem.design();
    let (n, p) = x.dim();
    let means = &problem.stats.means;
    let groups = block_groups(n, block_len(p), GROUPS);
    groups
        .par_iter()
        .map(|group| {
            let mut best = 0.0_f64;
            for &(r0, r1) in group {
                if watch.is_some_and(|w| !w.go_on()) {
                    break;
                }
                for i in r0..r1 {
                    let w = problem.scaled_weight(i);
                    if w == 0.0 {
                        continue;
                    }
                    let mut s = 0.0;
                    for (j, ((&v, &m), &k)) in x.row(i).iter().zip(means).zip(inv_scale).enumerate()
                    {
                        let d = match pre {
                            Some(pre) => (v - m) * pre[j],
                            None => v - m,
                        };
                        let z = d * k;
                        s += z * z;
                    }
                    best = best.max(w * s);
                }
                if let Some(w) = watch {
                    w.rows_done(r1 - r0);
                }
            }
            best
        })
        .reduce(|| 0.0, f64::max)
}

/// `sum_i w_i ((x_ij - m_j) inv_scale_j)^2` for every column: the squared
/// norms of the transformed columns (one pass, fixed partition, partial
/// sums added in group order).
pub(crate) fn column_norms(
    problem: &Problem<'_>,
    inv_scale: &[f64],
    watch: Option<&Watch<'_>>,
) -> Vec<f64> {
    let x = problem.design();
    let (n, p) = x.dim();
    let means = &problem.stats.means;
    let groups = block_groups(n, block_len(p), GROUPS);
    let partials: Vec<Vec<f64>> = groups
        .par_iter()
        .map(|group| {
            let mut acc = vec![0.0; p];
            for &(r0, r1) in group {
                if watch.is_some_and(|w| !w.go_on()) {
                    break;
                }
                for i in r0..r1 {
                    let w = problem.scaled_weight(i);
                    if w == 0.0 {
                        continue;
                    }
                    let row = x.index_axis(Axis(0), i);
                    match row.to_slice() {
                        Some(row) => {
                            for (((a, &v), &m), &k) in
                                acc.iter_mut().zip(row).zip(means).zip(inv_scale)
                            {
                                let z = (v - m) * k;
                                *a += w * z * z;
                            }
                        }
                        None => {
                            for (((a, &v), &m), &k) in
                                acc.iter_mut().zip(row.iter()).zip(means).zip(inv_scale)
                            {
                                let z = (v - m) * k;
                                *a += w * z * z;
                            }
                        }
                    }
                }
                if let Some(w) = watch {
                    w.rows_done(r1 - r0);
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

/// The plain path with per-column pre-multipliers: `d_ij = (x_ij - m_j)
/// pre_j`, `r_i = t_i - sum_j d_ij c_j`, `acc_j += w_i r_i d_ij`.
fn rows_prescaled(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    let Inputs {
        x,
        means,
        coef,
        pre,
        ..
    } = *inputs;
    let pre = pre.unwrap_or(&[]);
    for i in rows {
        let w = inputs.problem.scaled_weight(i);
        if w == 0.0 {
            continue;
        }
        let row = x.index_axis(Axis(0), i);
        let mut fit = 0.0;
        for (((&v, &m), &c), &a) in row.iter().zip(means).zip(coef).zip(pre) {
            fit += ((v - m) * a) * c;
        }
        let r = inputs.target(i) - fit;
        let u = w * r;
        for (((acc, &v), &m), &a) in out.acc.iter_mut().zip(row.iter()).zip(means).zip(pre) {
            *acc += u * ((v - m) * a);
        }
        out.sq += u * r;
    }
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

/// One row: residual, then `acc += w r (x - m)`; returns `w r^2`.
#[inline(always)]
fn row_update(row: &[f64], means: &[f64], coef: &[f64], t: f64, w: f64, acc: &mut [f64]) -> f64 {
    let r = t - kernels::centered_dot(row, means, coef);
    let u = w * r;
    kernels::centered_axpy(acc, u, row, means);
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

/// Rows of a design stored row after row without gaps, with a contiguous
/// target (and weights): plain slices, no per-row indexing.
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
    let mut sq = 0.0;
    // Wide rows: the rows about two KiB ahead are fetched while this one
    // is worked on (1, 2, 4 and 8 KiB measured at 1,000,000 x 100: 2 the
    // steadiest, the pass 5-10% closer to one streaming read). Narrow rows
    // are left to the hardware (at 10 columns the prefetches cost 10%).
    let ahead = (p >= PREFETCH_MIN_COLUMNS).then(|| PREFETCH_VALUES.div_ceil(p) * p);
    for (k, (row, &yi)) in data.chunks_exact(p).zip(y).enumerate() {
        if let Some(ahead) = ahead {
            kernels::prefetch_span(data, k * p + ahead, p);
        }
        let wi = if WEIGHTED { w[k] * inv_ws } else { 1.0 };
        if WEIGHTED && wi == 0.0 {
            continue;
        }
        let t = if inv_sy == 0.0 {
            0.0
        } else {
            (yi - ym) * inv_sy
        };
        sq += row_update(row, inputs.means, inputs.coef, t, wi, &mut out.acc);
    }
    out.sq += sq;
}

/// The contiguous row-major path for rows `r0..r1`; `false` (nothing done)
/// if the block, the target or the weights are not contiguous.
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
        // A row of weight zero takes no part, whatever its values (its
        // residual may be infinite, and 0 * inf is NaN).
        if w != 0.0 {
            *uk = w * rk;
            out.sq += *uk * rk;
        }
    }
    for (j, col) in block.axis_iter(Axis(1)).enumerate() {
        let m = means[j];
        out.acc[j] += match col.to_slice() {
            Some(col) => kernels::shifted_dot(col, m, &u),
            None => col.iter().zip(&u).map(|(&v, &uk)| (v - m) * uk).sum(),
        };
    }
}

// The three paths, each compiled once per instruction set and picked at
// run time (see `crate::linalg::kernels::dispatch`), so that the
// element-wise loops between the vector kernels use the wider
// instructions too.

/// Runs the contiguous row-major path if the block qualifies; `false` if not
/// (nothing was done).
fn dispatch_contiguous(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) -> bool {
    if inputs.means.is_empty() {
        return false;
    }
    kernels::dispatch(
        #[inline(always)]
        || contiguous_any(inputs, r0, r1, out),
    )
}

fn dispatch_rows(inputs: &Inputs<'_, '_>, rows: impl Iterator<Item = usize>, out: &mut Pass) {
    kernels::dispatch(
        #[inline(always)]
        || rows_impl(inputs, rows, out),
    )
}

fn dispatch_block_cols(inputs: &Inputs<'_, '_>, r0: usize, r1: usize, out: &mut Pass) {
    kernels::dispatch(
        #[inline(always)]
        || block_cols_impl(inputs, r0, r1, out),
    )
}

#[cfg(test)]
mod tests {
    use crate::linalg::extended::Accumulator;
    use crate::linalg::kernels;

    /// Deterministic values of assorted sizes and signs.
    fn values(n: usize, seed: u64) -> Vec<f64> {
        let mut state = seed.wrapping_mul(0x9e37_79b9_7f4a_7c15) | 1;
        (0..n)
            .map(|_| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                let u = (state >> 11) as f64 / (1u64 << 53) as f64;
                (u - 0.5) * 10f64.powi((state % 7) as i32 - 3)
            })
            .collect()
    }

    /// The pass's kernels against the same sums in double-double
    /// arithmetic (the differences `x - m` are formed alike, then each
    /// product and sum is exact): within a few units of rounding of the
    /// sum of magnitudes, and the same bits under `dispatch` as without.
    #[test]
    fn kernels_match_double_double_sums() {
        for n in [0usize, 1, 3, 7, 8, 9, 15, 16, 17, 100, 257] {
            let (x, m, c) = (values(n, 1), values(n, 2), values(n, 3));
            let mut exact = Accumulator::default();
            let mut shifted = Accumulator::default();
            let (mut scale, mut scale_s) = (0.0, 0.0);
            for k in 0..n {
                exact.add_product(x[k] - m[k], c[k]);
                shifted.add_product(x[k] - 0.25, c[k]);
                scale += ((x[k] - m[k]) * c[k]).abs();
                scale_s += ((x[k] - 0.25) * c[k]).abs();
            }
            let d = kernels::dispatch(
                #[inline(always)]
                || kernels::centered_dot(&x, &m, &c),
            );
            let s = kernels::dispatch(
                #[inline(always)]
                || kernels::shifted_dot(&x, 0.25, &c),
            );
            assert_eq!(d.to_bits(), kernels::centered_dot(&x, &m, &c).to_bits());
            assert_eq!(s.to_bits(), kernels::shifted_dot(&x, 0.25, &c).to_bits());
            let bound = |scale: f64| 8.0 * n as f64 * f64::EPSILON * scale;
            assert!((d - exact.value()).abs() <= bound(scale), "n = {n}");
            assert!((s - shifted.value()).abs() <= bound(scale_s), "n = {n}");
            // axpy: each entry rounds once (a fused multiply-add), so it is
            // within one rounding of the double-double value.
            let mut a = values(n, 4);
            let before = a.clone();
            kernels::dispatch(
                #[inline(always)]
                || kernels::centered_axpy(&mut a, -1.5, &x, &m),
            );
            for k in 0..n {
                let mut e = Accumulator::default();
                e.add(before[k]);
                e.add_product(-1.5, x[k] - m[k]);
                let v = e.value();
                assert!(
                    (a[k] - v).abs() <= 2.0 * f64::EPSILON * v.abs(),
                    "entry {k} of {n}: {} against {v}",
                    a[k]
                );
            }
        }
    }
}
